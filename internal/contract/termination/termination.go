// Package termination handles the termination message a Job's container
// leaves for the controller: where the tools write it by default, and the
// strict reading of the one JSON object it must hold.
package termination

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
)

// DefaultFile is where a container's termination message goes.
const DefaultFile = "/dev/termination-log"

// MaxBytes is the most a termination message holds.
const MaxBytes = 4096

// FileEnv names an environment variable that, when set, says where the
// termination message goes: for a container whose terminationMessagePath is
// not the default, and for the demo's executor.
const FileEnv = "PLUMBLINE_TERMINATION_FILE"

// Default is $PLUMBLINE_TERMINATION_FILE when set, else DefaultFile when it
// exists (in a container), else "" (at a terminal, where no compact report
// is wanted unless asked for).
func Default() string {
	if p := os.Getenv(FileEnv); p != "" {
		return p
	}
	if _, err := os.Stat(DefaultFile); err == nil {
		return DefaultFile
	}
	return ""
}

// Problem is what is wrong with a termination message.
type Problem int

const (
	OK Problem = iota
	Missing
	TooLarge
	Malformed
)

// Decode reads a termination message as one JSON object into v, refusing
// an empty message, one over MaxBytes, unknown fields and anything after
// the object. what names the report in the explanation.
func Decode(raw []byte, what string, v any) (Problem, string) {
	trimmed := bytes.TrimSpace(raw)
	if len(trimmed) == 0 {
		return Missing, "the container wrote no report to its termination message"
	}
	if len(raw) > MaxBytes {
		return TooLarge, fmt.Sprintf("the report is %d bytes; a termination message holds at most %d", len(raw), MaxBytes)
	}
	dec := json.NewDecoder(bytes.NewReader(trimmed))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return Malformed, fmt.Sprintf("the report is not a valid %s: %v", what, err)
	}
	if _, err := dec.Token(); !errors.Is(err, io.EOF) {
		return Malformed, "the report has data after its JSON object"
	}
	return OK, ""
}
