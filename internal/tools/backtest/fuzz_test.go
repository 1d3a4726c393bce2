package backtest

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plumbline.dev/plumbline/api/v1alpha1"
)

// FuzzLoadCSV: whatever history file a person passes, loading it neither
// panics nor hangs, a refusal names the flag or the file and is an input
// error (exit code 2), and an accepted history replays: a schedule and a
// trigger over it end, whatever its span.
func FuzzLoadCSV(f *testing.F) {
	for _, s := range []string{
		"time,value\n2026-11-02T00:00:00Z,0.82\n2026-11-02T00:01:00Z,0.81\n2026-11-02T00:02:00Z,0.7\n",
		"time,value,labelled_rows,retrained\n1700000000,0.8,10,0\n1700000060,0.79,20,1\n",
		"time,value\n2026-11-02T00:00:00Z,0.82\n2026-12-02T00:00:00Z,0.5\n",
		"time,value\n1,2\n", "Value,TIME\nx,y\n", "time\n", "",
	} {
		f.Add([]byte(s))
	}
	policies := []Policy{
		{Name: "weekly", Schedule: &v1alpha1.ScheduleSpec{Cron: "0 3 * * 1"}},
		{Name: "trigger", Triggers: []v1alpha1.TriggerSpec{{Name: "auc-drop", Below: below(0.78), ForSeconds: 600, EverySeconds: 60}}},
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(t.TempDir(), "history.csv")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		h, err := LoadCSV(p)
		if err != nil {
			var in *InputError
			if !errors.As(err, &in) || !strings.Contains(err.Error(), "--history") && !strings.Contains(err.Error(), p) {
				t.Fatalf("refusal %q is not an input error naming --history or the file", err)
			}
			return
		}
		for i := 1; i < len(h.Points); i++ {
			if !h.Points[i].T.After(h.Points[i-1].T) {
				t.Fatalf("accepted a history out of time order at point %d", i)
			}
		}
		start := time.Now()
		for _, pol := range policies {
			if _, err := Replay(h, pol, opts(0.8), 0.85); err != nil {
				var in *InputError
				if !errors.As(err, &in) {
					t.Fatalf("policy %s: %v", pol.Name, err)
				}
			}
		}
		if d := time.Since(start); d > 10*time.Second {
			t.Fatalf("replaying a %d-point history took %s", len(h.Points), d)
		}
	})
}
