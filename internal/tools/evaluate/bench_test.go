package evaluate

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"plumbline.dev/plumbline/internal/tools/table"
)

// writeGolden writes a synthetic binary golden set of n rows over five
// depots, straight to disk.
func writeGolden(b *testing.B, n int) string {
	b.Helper()
	p := filepath.Join(b.TempDir(), "golden.csv")
	f, err := os.Create(p)
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	fmt.Fprintln(w, "parcel_id,depot,was_late,candidate_score,baseline_score,must_pass")
	rng := rand.New(rand.NewPCG(1, 2))
	depots := []string{"north", "harbour", "fenwick", "lakeside", "old-mill"}
	for i := 0; i < n; i++ {
		y := 0
		if rng.Float64() < 0.3 {
			y = 1
		}
		z := rng.NormFloat64() + 1.6*float64(y) - 0.6
		zb := 0.7*z + 0.7*rng.NormFloat64()
		fmt.Fprintf(w, "LK-%07d,%s,%d,%.4f,%.4f,%d\n", i, depots[rng.IntN(5)], y, 1/(1+math.Exp(-z)), 1/(1+math.Exp(-zb)), boolInt(i%1000 == 0))
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	f.Close()
	return p
}

func maxRSS() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return ru.Maxrss * 1024
}

// BenchmarkMillionRows: the whole run of plumbline evaluate on 1,000,000
// binary rows, five segments, 1,000 bootstrap resamples. Target: under 5 s
// and 1 GiB on a 2-core machine. Reports seconds per run and the process's
// peak resident memory.
//
//	go test ./internal/evaluate -run '^$' -bench MillionRows -benchtime 1x
func BenchmarkMillionRows(b *testing.B) {
	path := writeGolden(b, 1_000_000)
	args := []string{"--input", path, "--label", "was_late", "--candidate", "candidate_score", "--baseline", "baseline_score",
		"--segment", "depot", "--must-pass", "must_pass", "--id", "parcel_id", "--resamples", "1000",
		"--termination-file", filepath.Join(b.TempDir(), "term"), "--out", filepath.Join(b.TempDir(), "full.json")}
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		if err := Command(args, func(string) string { return "" }, io.Discard, io.Discard); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(time.Since(start).Seconds()/float64(b.N), "s/run")
	b.ReportMetric(float64(maxRSS())/(1<<20), "peak-RSS-MiB")
}

// BenchmarkCSVParse: reading the golden set's cells through the CSV reader
// against reading the same bytes without parsing. Reports MB/s of both and
// their ratio.
func BenchmarkCSVParse(b *testing.B) {
	path := writeGolden(b, 1_000_000)
	st, _ := os.Stat(path)
	mb := float64(st.Size()) / 1e6
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		r, err := table.Open(path, table.CSV)
		if err != nil {
			b.Fatal(err)
		}
		for {
			cells, err := r.Next()
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				b.Fatal(err)
			}
			cells[3].Float()
			cells[4].Float()
		}
		r.Close()
	}
	parse := time.Since(start) / time.Duration(b.N)
	b.StopTimer()
	start = time.Now()
	f, _ := os.Open(path)
	if _, err := io.Copy(io.Discard, bufio.NewReaderSize(f, 1<<20)); err != nil {
		b.Fatal(err)
	}
	f.Close()
	raw := time.Since(start)
	b.ReportMetric(mb/parse.Seconds(), "parse-MB/s")
	b.ReportMetric(mb/raw.Seconds(), "read-MB/s")
	b.ReportMetric(float64(parse)/float64(raw), "parse/read")
}
