package v1alpha1

import (
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"sigs.k8s.io/yaml"
)

// Every string and list in plumbline's own schema is bounded, and every
// integer in a spec has a minimum: an unbounded field lets one object eat the
// API server's memory or CEL's cost budget. The Job templates are upstream
// types with their own validation at Job creation and are not walked, nor
// are apiVersion and kind, which the API server itself checks.
func TestCRDSchemasAreBounded(t *testing.T) {
	files, err := filepath.Glob("../../config/crd/bases/*.yaml")
	if err != nil || len(files) != 2 {
		t.Fatalf("want 2 CRDs, found %v (%v)", files, err)
	}
	for _, f := range files {
		raw, err := os.ReadFile(f)
		if err != nil {
			t.Fatal(err)
		}
		var crd map[string]any
		if err := yaml.Unmarshal(raw, &crd); err != nil {
			t.Fatal(err)
		}
		versions := crd["spec"].(map[string]any)["versions"].([]any)
		for _, v := range versions {
			schema := v.(map[string]any)["schema"].(map[string]any)["openAPIV3Schema"].(map[string]any)
			var unbounded []string
			walkSchema("", schema, &unbounded)
			sort.Strings(unbounded)
			for _, u := range unbounded {
				t.Errorf("%s: %s", filepath.Base(f), u)
			}
		}
	}
}

func walkSchema(path string, s map[string]any, out *[]string) {
	if strings.HasSuffix(path, ".jobTemplate") || path == ".metadata" || path == ".apiVersion" || path == ".kind" {
		return
	}
	_, hasEnum := s["enum"]
	switch s["type"] {
	case "string":
		_, hasMax := s["maxLength"]
		_, hasFormat := s["format"]
		if !hasMax && !hasEnum && !hasFormat {
			*out = append(*out, path+": string without maxLength or enum")
		}
	case "array":
		if _, ok := s["maxItems"]; !ok {
			*out = append(*out, path+": list without maxItems")
		}
	case "integer":
		if _, ok := s["minimum"]; !ok && strings.HasPrefix(path, ".spec") {
			*out = append(*out, path+": integer without minimum")
		}
	}
	if props, ok := s["properties"].(map[string]any); ok {
		for k, p := range props {
			walkSchema(path+"."+k, p.(map[string]any), out)
		}
	}
	if items, ok := s["items"].(map[string]any); ok {
		walkSchema(path+"[]", items, out)
	}
}
