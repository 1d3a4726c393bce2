package datacheck

import (
	"bytes"
	"fmt"
	"math"
	"os"
	"sort"
	"strings"

	"sigs.k8s.io/yaml"
)

// Column types of a schema.
const (
	Numeric     = "numeric"
	Categorical = "categorical"
	Ignore      = "ignore"
)

// MaxCategories is the most distinct values a categorical column may have;
// a text column with more is treated as free text (ignored) when the type
// is inferred.
const MaxCategories = 1000

// Schema says what the columns of a batch hold. It is read from a YAML or
// JSON file, or inferred from the reference batch and written out for
// review.
type Schema struct {
	// ID names the column of a row id: duplicate ids are a finding and the
	// column is not tested for drift.
	ID string `json:"id,omitempty"`
	// Columns describes the columns checked. Columns of a batch the schema
	// does not list are left alone.
	Columns []ColumnSchema `json:"columns"`
}

// ColumnSchema describes one column.
type ColumnSchema struct {
	Name string `json:"name"`
	// Type is numeric, categorical or ignore (checked for missing values
	// only).
	Type string `json:"type"`
	// Required columns may have no missing value at all.
	Required bool `json:"required,omitempty"`
	// Min and Max bound a numeric column; a value outside is out of range.
	Min *float64 `json:"min,omitempty"`
	Max *float64 `json:"max,omitempty"`
	// Categories are the values a categorical column may take; any other
	// value is an unseen category, a quality finding. Empty: the values of
	// the reference, left open (a new value is drift, not a finding).
	Categories []string `json:"categories,omitempty"`
}

// LoadSchema reads a schema file (YAML or JSON), refusing unknown fields.
func LoadSchema(path string) (*Schema, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("--schema: %w", err)
	}
	var s Schema
	if err := yaml.UnmarshalStrict(raw, &s); err != nil {
		return nil, fmt.Errorf("--schema %s: %w", path, err)
	}
	if err := s.Validate(); err != nil {
		return nil, fmt.Errorf("--schema %s: %w", path, err)
	}
	return &s, nil
}

// Validate checks a schema, naming the field at fault and the fix.
func (s *Schema) Validate() error {
	if len(s.Columns) == 0 {
		return fmt.Errorf("columns: list at least one column")
	}
	seen := map[string]bool{}
	for i, c := range s.Columns {
		at := fmt.Sprintf("columns[%d]", i)
		if c.Name != "" {
			at = fmt.Sprintf("columns[%d] (%s)", i, c.Name)
		}
		switch {
		case strings.TrimSpace(c.Name) == "":
			return fmt.Errorf("%s.name: name the column", at)
		case seen[c.Name]:
			return fmt.Errorf("%s.name: %q is listed twice; list each column once", at, c.Name)
		case c.Type != Numeric && c.Type != Categorical && c.Type != Ignore:
			return fmt.Errorf("%s.type: %q; want numeric, categorical or ignore", at, c.Type)
		case c.Type != Numeric && (c.Min != nil || c.Max != nil):
			return fmt.Errorf("%s: min and max bound numeric columns only; remove them or make the type numeric", at)
		case c.Type != Categorical && len(c.Categories) > 0:
			return fmt.Errorf("%s.categories: only a categorical column has categories; remove them or make the type categorical", at)
		case c.Min != nil && c.Max != nil && *c.Min > *c.Max:
			return fmt.Errorf("%s: min %v is above max %v", at, *c.Min, *c.Max)
		case len(c.Categories) > MaxCategories:
			return fmt.Errorf("%s.categories: %d listed, at most %d; a column with more values is free text: make it ignore", at, len(c.Categories), MaxCategories)
		case c.Min != nil && (math.IsNaN(*c.Min) || math.IsInf(*c.Min, 0)), c.Max != nil && (math.IsNaN(*c.Max) || math.IsInf(*c.Max, 0)):
			return fmt.Errorf("%s: min and max must be finite numbers", at)
		}
		cats := map[string]bool{}
		for _, v := range c.Categories {
			if cats[v] {
				return fmt.Errorf("%s.categories: %q is listed twice", at, v)
			}
			cats[v] = true
		}
		seen[c.Name] = true
	}
	if c := s.column(s.ID); s.ID != "" && c != nil && c.Type != Ignore {
		return fmt.Errorf("columns (%s).type: %s is the id column (checked for duplicates, not drift), so its type must be ignore, not %s; or leave it out of columns", s.ID, s.ID, c.Type)
	}
	return nil
}

// column finds a column's schema.
func (s *Schema) column(name string) *ColumnSchema {
	for i := range s.Columns {
		if s.Columns[i].Name == name {
			return &s.Columns[i]
		}
	}
	return nil
}

// schemaHeader heads a written schema, so whoever reads it knows where it
// came from and what to review.
const schemaHeader = `# plumbline datacheck schema, inferred from the reference batch %s.
# Review it before you keep it: a column of integer codes (a depot number,
# say) is inferred numeric and may be categorical; numeric bounds are the
# reference's observed range widened by three times its width on each side
# (never below 0 for a column with no negative value), so widen or narrow
# them to what the data can really hold. Listed categories are closed: a
# value outside them is a quality finding that blocks retraining. Delete a
# column's categories to leave it open (a new value then counts as drift).
`

// Write writes the schema as YAML with a header comment.
func (s *Schema) Write(path, from string) error {
	body, err := yaml.Marshal(s)
	if err != nil {
		return fmt.Errorf("--write-schema: %w", err)
	}
	var b bytes.Buffer
	fmt.Fprintf(&b, schemaHeader, from)
	b.Write(body)
	if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
		return fmt.Errorf("--write-schema: %w", err)
	}
	return nil
}

// inferType decides a column's type from what the reference held: numeric
// when at least 99% of its values read as numbers, else categorical when it
// has at most MaxCategories distinct values and repeats some, else ignored
// (free text, ids: a value on every row has no distribution to compare).
func inferType(nonNull, numbers int64, distinct int, overflow bool) (string, string) {
	switch {
	case nonNull == 0:
		return Ignore, "always empty in the reference"
	case float64(numbers) >= 0.99*float64(nonNull):
		return Numeric, ""
	case !overflow && distinct <= MaxCategories && (int64(distinct) < nonNull || nonNull <= 20):
		return Categorical, ""
	case !overflow && distinct <= MaxCategories:
		return Ignore, "a different value on every row (an id or free text)"
	default:
		return Ignore, fmt.Sprintf("more than %d distinct values that are not numbers (free text or ids)", MaxCategories)
	}
}

// widen is the inferred range of a numeric column: the observed range
// widened by three times its width on each side (or by three times the
// value when the range is one point). The tails of a fresh batch reach past
// a small reference's extremes as a matter of course (a 400-row sample of
// an exponential feature leaves its largest value well short of what the
// next 400 rows bring), and must not read as out of range; a sentinel such
// as -999 or a change of units still does. A column never negative in the
// reference stays so. These bounds guard against broken values; they are
// not the data's law, and a schema can set its own. The factor is a rule of
// ours, not a published one.
func widen(lo, hi float64) (float64, float64) {
	w := 3 * (hi - lo)
	if w == 0 {
		w = 3 * math.Abs(lo)
	}
	if w == 0 {
		w = 1
	}
	low := lo - w
	if lo >= 0 && low < 0 {
		low = 0 // never negative in the reference: stays so
	}
	return low, hi + w
}

// sortedKeys lists a count map's keys by name.
func sortedKeys(m map[string]int64) []string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	return keys
}
