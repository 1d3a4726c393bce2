package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestTrimKeepsOwnDescriptions(t *testing.T) {
	in := `apiVersion: apiextensions.k8s.io/v1
kind: CustomResourceDefinition
spec:
  versions:
    - schema:
        openAPIV3Schema:
          properties:
            spec:
              description: our spec
              properties:
                jobTemplate:
                  description: our job template
                  properties:
                    spec:
                      description: upstream job spec
                      properties:
                        backoffLimit:
                          description: upstream backoff
                          type: integer
                  type: object
                cron:
                  description: our cron
                  type: string
`
	path := filepath.Join(t.TempDir(), "crd.yaml")
	if err := os.WriteFile(path, []byte(in), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := trimFile(path); err != nil {
		t.Fatal(err)
	}
	raw, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	out := string(raw)
	for _, keep := range []string{"our spec", "our job template", "our cron", "backoffLimit:", "type: integer"} {
		if !strings.Contains(out, keep) {
			t.Errorf("lost %q:\n%s", keep, out)
		}
	}
	for _, drop := range []string{"upstream job spec", "upstream backoff"} {
		if strings.Contains(out, drop) {
			t.Errorf("kept %q:\n%s", drop, out)
		}
	}
}
