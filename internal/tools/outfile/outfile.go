// Package outfile writes the reports the tools leave behind (--out): a
// JSON document, indented for people, to a file.
package outfile

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
)

// JSON writes v as indented JSON.
func JSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// WriteJSON writes v as indented JSON to a file; flag names the flag that
// asked, for the error.
func WriteJSON(path, flag string, v any) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("%s: %w", flag, err)
	}
	if err := JSON(f, v); err != nil {
		f.Close()
		return fmt.Errorf("%s: %w", flag, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("%s: %w", flag, err)
	}
	return nil
}
