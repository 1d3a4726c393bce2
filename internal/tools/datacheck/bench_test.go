package datacheck

import (
	"bufio"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"syscall"
	"testing"
	"time"
)

// writeWide writes a synthetic batch of n rows and 50 columns: a parcel id,
// 41 numeric features (normal, log-normal, exponential, uniform, small
// integers) and 8 categorical ones (4 to 30 categories). shift moves every
// fifth numeric feature, to give the drift tests something to find.
func writeWide(b *testing.B, path string, n int, seed uint64, shift float64) {
	b.Helper()
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	w.WriteString("parcel_id")
	for j := 0; j < 41; j++ {
		fmt.Fprintf(w, ",x%02d", j)
	}
	for j := 0; j < 8; j++ {
		fmt.Fprintf(w, ",k%d", j)
	}
	w.WriteByte('\n')
	rng := rand.New(rand.NewPCG(seed, 1))
	var buf []byte
	for i := 0; i < n; i++ {
		buf = append(buf[:0], "LK-"...)
		buf = strconv.AppendInt(buf, int64(i), 10)
		for j := 0; j < 41; j++ {
			var x float64
			switch j % 5 {
			case 0:
				x = rng.NormFloat64()*10 + 50
			case 1:
				x = math.Exp(rng.NormFloat64()*0.6 + 2.5)
			case 2:
				x = rng.ExpFloat64() * 3
			case 3:
				x = rng.Float64() * 100
			case 4:
				x = float64(rng.IntN(12))
			}
			if j%5 == 0 {
				x += shift * 10
			}
			buf = append(buf, ',')
			buf = strconv.AppendFloat(buf, x, 'f', 3, 64)
		}
		for j := 0; j < 8; j++ {
			buf = append(buf, ",cat"...)
			buf = strconv.AppendInt(buf, int64(rng.IntN(4+j*3)), 10)
		}
		buf = append(buf, '\n')
		w.Write(buf)
	}
	if err := w.Flush(); err != nil {
		b.Fatal(err)
	}
	f.Close()
}

func maxRSS() int64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return ru.Maxrss * 1024
}

// BenchmarkMillionRowsFiftyColumns: the whole run of plumbline datacheck on
// a 1,000,000-row, 50-column CSV reference against a current batch of the
// same size (about 390 MB each). Target: under 10 s on a 2-core machine,
// memory bounded (the rows stream through; samples of 100,000 values per
// numeric column; duplicate hashes of the current batch). Reports seconds
// per run, read throughput and the process's peak resident memory.
//
//	go test ./internal/datacheck -run '^$' -bench MillionRows -benchtime 1x
func BenchmarkMillionRowsFiftyColumns(b *testing.B) {
	dir := b.TempDir()
	ref, cur := filepath.Join(dir, "reference.csv"), filepath.Join(dir, "current.csv")
	writeWide(b, ref, 1_000_000, 1, 0)
	writeWide(b, cur, 1_000_000, 2, 0.2)
	var size int64
	for _, p := range []string{ref, cur} {
		st, _ := os.Stat(p)
		size += st.Size()
	}
	args := []string{"--reference", ref, "--current", cur, "--id", "parcel_id",
		"--out", filepath.Join(dir, "full.json"), "--termination-file", filepath.Join(dir, "term")}
	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		if err := Command(args, io.Discard, io.Discard); err != nil {
			b.Fatal(err)
		}
	}
	secs := time.Since(start).Seconds() / float64(b.N)
	b.ReportMetric(secs, "s/run")
	b.ReportMetric(float64(size)/secs/(1<<20), "MiB/s")
	b.ReportMetric(float64(maxRSS())/(1<<20), "peak-RSS-MiB")
}
