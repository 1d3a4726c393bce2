package policy

import (
	"fmt"
	"strings"
	"time"
)

// Early-warning outcomes: the InputsDrifted condition's status and reason.
const (
	// InputsMoved: at least one drift check breached.
	InputsMoved = "InputsMoved"
	// InputsSteady: every drift check was judged and none breached.
	InputsSteady = "InputsSteady"
	// DriftUnknown: none breached, but some could not be judged.
	DriftUnknown = "DriftUnknown"
)

// EarlyWarning is what the drift checks of an early warning say.
type EarlyWarning struct {
	// Drifted is true when some check breached, false when none did and all
	// were judged; Known is false when none breached and some could not be
	// judged.
	Drifted, Known bool
	Reason         string
	Message        string
	// Features names the drift checks that breached, in spec order.
	Features []string
}

// JudgeInputs turns the drift checks run for the early warning into its
// verdict. With a label delay the message says which predictions' quality
// is not known yet.
func JudgeInputs(drift []Check, delay time.Duration, now time.Time) EarlyWarning {
	var moved, unknown, steady []string
	var features []string
	for _, c := range drift {
		switch {
		case !c.Known:
			unknown = append(unknown, c.String())
		case c.Breached:
			moved = append(moved, c.String())
			features = append(features, c.Name)
		default:
			steady = append(steady, c.String())
		}
	}
	pending := ""
	if delay > 0 {
		pending = fmt.Sprintf("; the quality of the predictions since %s is not known yet (label delay %s)", now.Add(-delay).UTC().Format(time.RFC3339), delay)
	}
	switch {
	case len(moved) > 0:
		w := EarlyWarning{Drifted: true, Known: true, Reason: InputsMoved, Features: features}
		w.Message = fmt.Sprintf("%s: %s%s; nothing is started by this alone", w.Headline(), strings.Join(moved, "; "), pending)
		return w
	case len(unknown) > 0:
		return EarlyWarning{Reason: DriftUnknown, Message: "the inputs cannot be judged: " + strings.Join(unknown, "; ")}
	}
	return EarlyWarning{Known: true, Reason: InputsSteady, Message: "the inputs are steady: " + strings.Join(steady, "; ")}
}

// Headline is how a message of drifted inputs begins: which checks drifted.
// A message that begins otherwise told of other checks.
func (w EarlyWarning) Headline() string {
	return fmt.Sprintf("the inputs moved (%s)", strings.Join(w.Features, ", "))
}
