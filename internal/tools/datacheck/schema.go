package datacheck

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"regexp"
	"sort"
	"strconv"
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
	// Categories are the values a categorical column is known to take.
	// Empty: the values of the reference.
	Categories []string `json:"categories,omitempty"`
	// Closed says the categories are all a column may take: a value outside
	// them is an unseen category, a quality finding that blocks retraining.
	// Open (the default), a new value counts as drift only.
	Closed bool `json:"closed,omitempty"`
}

// LoadSchema reads a schema file (YAML or JSON). An unknown key or a value
// of the wrong kind is refused with the path of the key at fault.
func LoadSchema(path string) (*Schema, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("--schema: %w", err)
	}
	s, err := decodeSchema(raw)
	if err != nil {
		return nil, fmt.Errorf("--schema %s: %w", path, err)
	}
	if err := s.Validate(); err != nil {
		return nil, fmt.Errorf("--schema %s: %w", path, err)
	}
	return s, nil
}

// decodeSchema reads a schema key by key, so an error names the key as the
// file spells it (columns[2] (depot).min), not a Go type.
func decodeSchema(raw []byte) (*Schema, error) {
	var doc any
	if err := yaml.Unmarshal(raw, &doc); err != nil {
		return nil, fmt.Errorf("not YAML or JSON: %w", err)
	}
	top, ok := doc.(map[string]any)
	if !ok {
		return nil, fmt.Errorf("want a mapping with the keys id and columns, got %s", kindOf(doc))
	}
	s := &Schema{}
	keys := make([]string, 0, len(top))
	for k := range top {
		keys = append(keys, k)
	}
	sort.Strings(keys) // the first fault found is the same every time
	for _, k := range keys {
		v := top[k]
		switch k {
		case "id":
			id, ok := v.(string)
			if !ok {
				return nil, fmt.Errorf("id: want a column name, got %s", kindOf(v))
			}
			s.ID = id
		case "columns":
			list, ok := v.([]any)
			if !ok {
				return nil, fmt.Errorf("columns: want a list of columns, got %s", kindOf(v))
			}
			for i, item := range list {
				c, err := decodeColumn(item, i)
				if err != nil {
					return nil, err
				}
				s.Columns = append(s.Columns, c)
			}
		default:
			return nil, fmt.Errorf("%s: unknown key; a schema has id and columns", k)
		}
	}
	return s, nil
}

// columnKeys are the keys of a column, in the order a written schema has
// them.
var columnKeys = []string{"name", "type", "required", "min", "max", "closed", "categories"}

func decodeColumn(item any, i int) (ColumnSchema, error) {
	var c ColumnSchema
	m, ok := item.(map[string]any)
	if !ok {
		return c, fmt.Errorf("columns[%d]: want a mapping with the keys %s, got %s", i, strings.Join(columnKeys, ", "), kindOf(item))
	}
	at := fmt.Sprintf("columns[%d]", i)
	if n, ok := m["name"].(string); ok && n != "" {
		at = fmt.Sprintf("columns[%d] (%s)", i, n)
	}
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		v := m[k]
		bad := func(want string) error { return fmt.Errorf("%s.%s: want %s, got %s", at, k, want, kindOf(v)) }
		switch k {
		case "name", "type":
			str, ok := v.(string)
			if !ok {
				return c, bad("text")
			}
			if k == "name" {
				c.Name = str
			} else {
				c.Type = str
			}
		case "required", "closed":
			b, ok := v.(bool)
			if !ok {
				return c, bad("true or false")
			}
			if k == "required" {
				c.Required = b
			} else {
				c.Closed = b
			}
		case "min", "max":
			f, ok := v.(float64)
			if !ok {
				return c, bad("a number")
			}
			if k == "min" {
				c.Min = &f
			} else {
				c.Max = &f
			}
		case "categories":
			list, ok := v.([]any)
			if !ok {
				return c, bad("a list of values")
			}
			for j, x := range list {
				switch x := x.(type) {
				case string:
					c.Categories = append(c.Categories, x)
				case float64:
					// A code written unquoted (3) is the text "3".
					c.Categories = append(c.Categories, strconv.FormatFloat(x, 'f', -1, 64))
				case bool:
					c.Categories = append(c.Categories, strconv.FormatBool(x))
				default:
					return c, fmt.Errorf("%s.categories[%d]: want a value, got %s", at, j, kindOf(x))
				}
			}
		default:
			return c, fmt.Errorf("%s.%s: unknown key; a column has %s", at, k, strings.Join(columnKeys, ", "))
		}
	}
	return c, nil
}

// kindOf names what a decoded YAML value is, for an error.
func kindOf(v any) string {
	switch v := v.(type) {
	case nil:
		return "nothing"
	case string:
		return fmt.Sprintf("the text %q", clip(v, 40))
	case float64:
		return fmt.Sprintf("the number %v", v)
	case bool:
		return fmt.Sprintf("%v", v)
	case []any:
		return "a list"
	case map[string]any:
		return "a mapping"
	}
	return fmt.Sprintf("%T", v)
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
		case c.Type != Categorical && c.Closed:
			return fmt.Errorf("%s.closed: only a categorical column's categories can be closed; remove it or make the type categorical", at)
		case c.Closed && len(c.Categories) == 0:
			return fmt.Errorf("%s.closed: a closed column lists its categories; list them, or set closed: false to take the reference's values", at)
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
# them to what the data can really hold. Categories are written open
# (closed: false): a new value counts as drift. Set closed: true where the
# list is all a column may hold, so that a value outside it is a quality
# finding that blocks retraining.
`

// Write writes the schema as YAML with a header comment, each column's
// name first.
func (s *Schema) Write(path, from string) error {
	var b bytes.Buffer
	fmt.Fprintf(&b, schemaHeader, from)
	if s.ID != "" {
		fmt.Fprintf(&b, "id: %s\n", yamlText(s.ID))
	}
	b.WriteString("columns:\n")
	for _, c := range s.Columns {
		fmt.Fprintf(&b, "  - name: %s\n    type: %s\n", yamlText(c.Name), yamlText(c.Type))
		if c.Required {
			b.WriteString("    required: true\n")
		}
		if c.Min != nil {
			fmt.Fprintf(&b, "    min: %s\n", strconv.FormatFloat(*c.Min, 'g', -1, 64))
		}
		if c.Max != nil {
			fmt.Fprintf(&b, "    max: %s\n", strconv.FormatFloat(*c.Max, 'g', -1, 64))
		}
		if c.Type == Categorical && len(c.Categories) > 0 {
			fmt.Fprintf(&b, "    closed: %v\n    categories:\n", c.Closed)
			for _, v := range c.Categories {
				fmt.Fprintf(&b, "      - %s\n", yamlText(v))
			}
		}
	}
	if err := os.WriteFile(path, b.Bytes(), 0o644); err != nil {
		return fmt.Errorf("--write-schema: %w", err)
	}
	return nil
}

// plainYAML matches text YAML reads back as the same text unquoted.
var plainYAML = regexp.MustCompile(`^[A-Za-z_][A-Za-z0-9_./-]*( [A-Za-z0-9_./-]+)*$`)

// yamlText writes text as a YAML scalar that reads back as that text:
// plain when it is a plain word, else double-quoted (a JSON string is a
// valid YAML double-quoted scalar).
func yamlText(v string) string {
	switch strings.ToLower(v) {
	case "true", "false", "yes", "no", "on", "off", "y", "n", "null", "~":
	default:
		if plainYAML.MatchString(v) {
			return v
		}
	}
	q, _ := json.Marshal(v)
	return string(q)
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
	// Rounded outward to three significant digits of the widening, so the
	// written bounds read as numbers a person would write (230.4, not
	// 230.36999999999998).
	exp := int(math.Floor(math.Log10(w))) - 2
	step := math.Pow(10, float64(exp))
	decimals := max(0, -exp)
	clean := func(x float64) float64 {
		v, _ := strconv.ParseFloat(strconv.FormatFloat(x, 'f', decimals, 64), 64)
		return v
	}
	low := clean(math.Floor((lo-w)/step) * step)
	if lo >= 0 && low < 0 {
		low = 0 // never negative in the reference: stays so
	}
	return low, clean(math.Ceil((hi+w)/step) * step)
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
