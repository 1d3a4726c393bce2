package integration

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"k8s.io/apimachinery/pkg/apis/meta/v1/unstructured"
	utilyaml "k8s.io/apimachinery/pkg/util/yaml"
	"sigs.k8s.io/yaml"
)

// readManifests reads every object in a YAML file.
func readManifests(t *testing.T, path string) []*unstructured.Unstructured {
	t.Helper()
	objs, err := decodeManifests(path)
	if err != nil {
		t.Fatal(err)
	}
	return objs
}

func decodeManifests(path string) ([]*unstructured.Unstructured, error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, err
	}
	return decodeYAMLStream(raw, path)
}

func decodeYAMLStream(raw []byte, what string) ([]*unstructured.Unstructured, error) {
	dec := utilyaml.NewYAMLOrJSONDecoder(bytes.NewReader(raw), 4096)
	var objs []*unstructured.Unstructured
	for {
		var m map[string]any
		if err := dec.Decode(&m); err != nil {
			if errors.Is(err, io.EOF) {
				break
			}
			return nil, fmt.Errorf("%s: %w", what, err)
		}
		if len(m) == 0 {
			continue
		}
		objs = append(objs, &unstructured.Unstructured{Object: m})
	}
	return objs, nil
}

// sample returns the one object in config/samples/<file>.
func sample(t *testing.T, file string) *unstructured.Unstructured {
	t.Helper()
	objs := readManifests(t, filepath.Join(repoRoot, "config", "samples", file))
	if len(objs) != 1 {
		t.Fatalf("%s: want one object, got %d", file, len(objs))
	}
	return objs[0]
}

// fromYAML parses one object written inline in a test.
func fromYAML(t *testing.T, text string) *unstructured.Unstructured {
	t.Helper()
	var m map[string]any
	if err := yaml.Unmarshal([]byte(text), &m); err != nil {
		t.Fatalf("test manifest: %v", err)
	}
	return &unstructured.Unstructured{Object: m}
}

var pathStep = regexp.MustCompile(`^([A-Za-z0-9_]+)(?:\[(\d+)\])?$`)

// setPath sets a value at a dotted path such as spec.triggers[0].below,
// creating maps on the way. A nil value removes the field.
func setPath(obj map[string]any, path string, value any) error {
	steps := strings.Split(path, ".")
	cur := obj
	for i, step := range steps {
		m := pathStep.FindStringSubmatch(step)
		if m == nil {
			return fmt.Errorf("bad path step %q", step)
		}
		key, idx := m[1], m[2]
		last := i == len(steps)-1
		if idx == "" {
			if last {
				if value == nil {
					delete(cur, key)
				} else {
					cur[key] = value
				}
				return nil
			}
			next, ok := cur[key].(map[string]any)
			if !ok {
				next = map[string]any{}
				cur[key] = next
			}
			cur = next
			continue
		}
		list, ok := cur[key].([]any)
		n, _ := strconv.Atoi(idx)
		if !ok || n >= len(list) {
			return fmt.Errorf("%s: no item %d", key, n)
		}
		if last {
			list[n] = value
			return nil
		}
		next, ok := list[n].(map[string]any)
		if !ok {
			return fmt.Errorf("%s[%d] is not an object", key, n)
		}
		cur = next
	}
	return nil
}

func mustSet(t *testing.T, obj *unstructured.Unstructured, path string, value any) {
	t.Helper()
	if err := setPath(obj.Object, path, value); err != nil {
		t.Fatalf("set %s: %v", path, err)
	}
}
