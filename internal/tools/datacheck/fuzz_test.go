package datacheck

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// FuzzLoadSchema: whatever schema file a person passes, loading it neither
// panics nor hangs, a refusal names --schema and the file, and an accepted
// schema is valid and reads back the same from its own JSON.
func FuzzLoadSchema(f *testing.F) {
	for _, s := range []string{
		"id: parcel_id\ncolumns:\n- name: parcel_id\n  type: ignore\n- name: depot\n  type: categorical\n  categories: [north, harbour]\n- name: weight_kg\n  type: numeric\n  min: 0\n  max: 70\n  required: true\n",
		`{"columns":[{"name":"distance_km","type":"numeric","min":0}]}`,
		"columns: []\n", "columns:\n- name: a\n  type: text\n", "columns:\n- {name: a, type: numeric, min: 5, max: 1}\n", "", "[", "columns: {a: 1}\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(t.TempDir(), "schema.yaml")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		s, err := LoadSchema(p)
		if err != nil {
			if !strings.HasPrefix(err.Error(), "--schema "+p+": ") {
				t.Fatalf("refusal %q does not name --schema and the file", err)
			}
			return
		}
		if err := s.Validate(); err != nil {
			t.Fatalf("accepted a schema that does not validate: %v", err)
		}
		b, err := json.Marshal(s)
		if err != nil {
			t.Fatalf("an accepted schema does not encode: %v", err)
		}
		again := filepath.Join(t.TempDir(), "again.json")
		if err := os.WriteFile(again, b, 0o644); err != nil {
			t.Fatal(err)
		}
		s2, err := LoadSchema(again)
		if err != nil {
			t.Fatalf("an accepted schema, written as JSON, is refused: %v\n%s", err, b)
		}
		if b2, _ := json.Marshal(s2); string(b2) != string(b) {
			t.Fatalf("the round trip changed the schema:\n%s\n%s", b, b2)
		}
	})
}
