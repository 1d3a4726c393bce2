package evaluate

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// FuzzLoad: whatever golden set a person passes, loading it for each task
// neither panics nor hangs, a refusal names the file, and an accepted set
// has one entry per row in every column.
func FuzzLoad(f *testing.F) {
	for _, s := range []string{
		"id,seg,y,c,b,m\nLK-1,north,1,0.9,0.7,1\nLK-2,harbour,0,0.2,0.4,0\nLK-3,north,1,0.6,0.3,0\n",
		"id,seg,y,c,b,m\nLK-1,north,late,late,on_time,true\nLK-2,north,on_time,late,late,false\n",
		"id,seg,y,c,b,m\n1,a,3.5,3.1,2.9,0\n2,a,-1,-0.5,0,1\n",
		"id,seg,y,c,b,m\n1,a,,0.5,0.5,0\n", "id,y\n1,1\n", "y,c,b\n1,NaN,Inf\n", "",
	} {
		f.Add([]byte(s))
	}
	cols := Columns{Label: "y", Candidate: "c", Baseline: "b", ID: "id", Segment: "seg", MustPass: "m"}
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(t.TempDir(), "golden.csv")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		for _, task := range []string{Binary, Multiclass, Regression} {
			c := cols
			if task == Regression {
				c.MustPass = "" // must-pass rows need a class to be right
			}
			ds, err := Load(p, "csv", task, c, "")
			if err != nil {
				if !strings.Contains(err.Error(), p) {
					t.Fatalf("%s: refusal %q does not name the file", task, err)
				}
				continue
			}
			if ds.N == 0 {
				t.Fatalf("%s: accepted a golden set with no rows", task)
			}
		}
	})
}
