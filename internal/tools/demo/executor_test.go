package demo

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	corev1 "k8s.io/api/core/v1"
)

// A stand-in for the plumbline binary: it prints its arguments, writes a
// termination message where the executor says, and exits with the code
// its first argument asks for.
const fakeBinary = `#!/bin/sh
echo "args: $*"
echo "env A=$A"
if [ -n "$PLUMBLINE_TERMINATION_FILE" ] && [ "$2" = "report" ]; then
  printf '{"schema":"x","seen":"%s"}' "$A" > "$PLUMBLINE_TERMINATION_FILE"
fi
echo "last words of $1"
exit "$1"
`

func TestExecutorRunsContainers(t *testing.T) {
	dir := t.TempDir()
	bin := filepath.Join(dir, "plumbline")
	if err := os.WriteFile(bin, []byte(fakeBinary), 0o755); err != nil {
		t.Fatal(err)
	}
	e := newExecutor(nil, "ns", bin, dir, func(string) {})
	ctx := context.Background()
	cases := []struct {
		name string
		c    corev1.Container
		code int
		msg  string
	}{
		{"the report is the termination message, $(VAR) expanded",
			corev1.Container{Name: "ok", Command: []string{"plumbline"}, Args: []string{"0", "report", "--x=$(A)"},
				Env: []corev1.EnvVar{{Name: "A", Value: "alpha"}}},
			0, `{"schema":"x","seen":"alpha"}`},
		{"no command: the image's entrypoint is plumbline",
			corev1.Container{Name: "entry", Args: []string{"0", "report"}, Env: []corev1.EnvVar{{Name: "A", Value: "b"}}},
			0, `{"schema":"x","seen":"b"}`},
		{"a failure without a report leaves the last line of its output",
			corev1.Container{Name: "fail", Command: []string{"/usr/local/bin/plumbline"}, Args: []string{"3"}},
			3, "last words of 3"},
		{"only the plumbline binary runs",
			corev1.Container{Name: "other", Command: []string{"python", "train.py"}},
			127, `the demo executor runs only the plumbline binary, not "python"`},
		{"valueFrom cannot be resolved",
			corev1.Container{Name: "secret", Env: []corev1.EnvVar{{Name: "K", ValueFrom: &corev1.EnvVarSource{}}}},
			1, "cannot resolve valueFrom for env K"},
	}
	for _, c := range cases {
		code, msg := e.runContainer(ctx, dir, &c.c)
		if code != c.code || !strings.Contains(msg, c.msg) {
			t.Errorf("%s: exit %d, message %q; want %d and %q", c.name, code, msg, c.code, c.msg)
		}
	}
	out, err := os.ReadFile(filepath.Join(dir, "ok.log"))
	if err != nil || !strings.Contains(string(out), "args: 0 report --x=alpha") {
		t.Errorf("the container's output is kept in its log: %q, %v", out, err)
	}
}
