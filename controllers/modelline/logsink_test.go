package modelline

import (
	"errors"
	"strings"
	"testing"

	"github.com/go-logr/logr/funcr"
	"k8s.io/apimachinery/pkg/types"
	"sigs.k8s.io/controller-runtime/pkg/reconcile"
)

// A pass's logger writes the same line the eager one would: the
// controller's values, the line's, those added later, and the caller's
// file (not the wrapper's); below its verbosity it writes nothing.
func TestRequestLoggerDefersValues(t *testing.T) {
	var lines []string
	base := funcr.New(func(prefix, args string) { lines = append(lines, prefix+" "+args) },
		funcr.Options{LogCaller: funcr.All, Verbosity: 0})
	build := requestLogger(base)
	l := build(&reconcile.Request{NamespacedName: types.NamespacedName{Namespace: "larkspur", Name: "late-risk"}})
	l = l.WithValues("reconcileID", "7f3a").WithName("pass")

	l.V(1).Info("not written")
	if len(lines) != 0 {
		t.Fatalf("a V(1) line was written at verbosity 0: %q", lines)
	}
	l.Info("judged", "trigger", "auc-drop")
	l.Error(errors.New("timeout"), "query failed")
	if len(lines) != 2 {
		t.Fatalf("lines %q, want 2", lines)
	}
	for _, want := range []string{`"controller"="modelline"`, `"namespace"="larkspur"`, `"name"="late-risk"`, `"reconcileID"="7f3a"`, `"trigger"="auc-drop"`, `"msg"="judged"`, `logsink_test.go`} {
		if !strings.Contains(lines[0], want) {
			t.Errorf("info line %q lacks %s", lines[0], want)
		}
	}
	if !strings.Contains(lines[1], `"error"="timeout"`) || !strings.Contains(lines[1], `"reconcileID"="7f3a"`) || !strings.Contains(lines[1], "logsink_test.go") {
		t.Errorf("error line %q", lines[1])
	}
	if !strings.HasPrefix(lines[0], "pass ") {
		t.Errorf("the name was lost: %q", lines[0])
	}
	if got := build(nil); got.GetSink() == nil {
		t.Error("the controller's own logger has no sink")
	}
}
