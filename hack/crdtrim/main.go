// Command crdtrim removes the field descriptions that controller-gen copies
// into a CRD from embedded Kubernetes types (the Job templates), keeping the
// descriptions of plumbline's own fields.
//
// A ModelLine embeds three batch/v1 JobTemplateSpecs. With their descriptions
// the CRD is over 1 MB of JSON, close to etcd's object limit and slow for the
// API server to load; without them it is about a fifth of that. The Job
// fields are documented by `kubectl explain job.spec`. `make manifests` runs
// this after controller-gen, so the committed CRDs stay generated.
//
// Usage: crdtrim FILE...
package main

import (
	"bytes"
	"fmt"
	"os"

	"go.yaml.in/yaml/v3"
)

// trimmed lists the property names whose subtrees are embedded Kubernetes
// types: the description of the property itself is kept.
var trimmed = map[string]bool{"jobTemplate": true}

func main() {
	if len(os.Args) < 2 {
		fmt.Fprintln(os.Stderr, "usage: crdtrim FILE...")
		os.Exit(2)
	}
	for _, path := range os.Args[1:] {
		if err := trimFile(path); err != nil {
			fmt.Fprintf(os.Stderr, "crdtrim: %s: %v\n", path, err)
			os.Exit(1)
		}
	}
}

func trimFile(path string) error {
	raw, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	var doc yaml.Node
	if err := yaml.Unmarshal(raw, &doc); err != nil {
		return fmt.Errorf("parse: %w", err)
	}
	walk(&doc, false)
	var out bytes.Buffer
	out.WriteString("---\n")
	enc := yaml.NewEncoder(&out)
	enc.SetIndent(2)
	if err := enc.Encode(&doc); err != nil {
		return fmt.Errorf("encode: %w", err)
	}
	if err := enc.Close(); err != nil {
		return fmt.Errorf("encode: %w", err)
	}
	return os.WriteFile(path, out.Bytes(), 0o644)
}

// walk visits n; inside a trimmed subtree it drops every "description" key.
func walk(n *yaml.Node, inside bool) {
	switch n.Kind {
	case yaml.DocumentNode, yaml.SequenceNode:
		for _, c := range n.Content {
			walk(c, inside)
		}
	case yaml.MappingNode:
		kept := n.Content[:0]
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			if inside && k.Value == "description" && v.Kind == yaml.ScalarNode {
				continue
			}
			kept = append(kept, k, v)
		}
		n.Content = kept
		for i := 0; i+1 < len(n.Content); i += 2 {
			k, v := n.Content[i], n.Content[i+1]
			if !inside && trimmed[k.Value] && v.Kind == yaml.MappingNode {
				trimInside(v)
				continue
			}
			walk(v, inside)
		}
	}
}

// trimInside keeps the description of the trimmed property's own schema and
// drops those of everything under it.
func trimInside(schema *yaml.Node) {
	for i := 0; i+1 < len(schema.Content); i += 2 {
		if schema.Content[i].Value == "description" {
			continue
		}
		walk(schema.Content[i+1], true)
	}
}
