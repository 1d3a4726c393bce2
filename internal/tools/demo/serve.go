package demo

import (
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/promhttp"
)

// The programs of the demo's story on a real cluster (test/e2e, make
// demo-real): `plumbline demo world` writes and changes the world on a
// volume the pods share, and `plumbline demo serve` is Larkspur's scorer in
// the serving Deployment's pods.

// Layout of the directory the story's pods share.
const (
	worldFile = "world.json"
	modelsDir = "models"
)

// PrepareWorld writes a new world whose first phase began a minute before
// now into dir (world.json), with the model Larkspur trained before
// adopting plumbline (models/late-risk-v0.json, the Imported version) and
// its old rules (models/late-risk-rules.json, the fallback).
func PrepareWorld(dir string, now time.Time) (*World, error) {
	models := filepath.Join(dir, modelsDir)
	if err := os.MkdirAll(models, 0o755); err != nil {
		return nil, fmt.Errorf("create %s: %w", models, err)
	}
	w := &World{Seed: uint64(now.UnixNano()), Phases: []Phase{{At: now.Add(-time.Minute), Note: "ordinary weeks at three depots"}}}
	if err := w.Save(filepath.Join(dir, worldFile)); err != nil {
		return nil, err
	}
	m, err := TrainModel(w.Sample(now.Add(-time.Minute), now, 10000, 2))
	if err != nil {
		return nil, err
	}
	if err := WriteArtifact("file://"+filepath.Join(models, "late-risk-v0.json"), m); err != nil {
		return nil, err
	}
	if err := WriteArtifact("file://"+filepath.Join(models, "late-risk-rules.json"), &Model{Schema: ArtifactSchema, Kind: "rules"}); err != nil {
		return nil, err
	}
	return w, nil
}

// writeVendorModel writes models/late-risk-vendor.json: the imported model
// as a vendor's broken export would hand it back, every weight's sign
// flipped, so its scores rank parcels upside down. The story imports it to
// show the gate refusing a candidate.
func writeVendorModel(dir string) error {
	m, err := ReadArtifact("file://" + filepath.Join(dir, modelsDir, "late-risk-v0.json"))
	if err != nil {
		return err
	}
	for i := range m.Weights {
		m.Weights[i] = -m.Weights[i]
	}
	return WriteArtifact("file://"+filepath.Join(dir, modelsDir, "late-risk-vendor.json"), m)
}

// Change starts phase p at its At. When p's feed is whole, the addresses
// the earlier broken phases lost are restored (backfilled) in the data
// read later.
func (w *World) Change(p Phase) {
	if !p.FeedBroken {
		for i := range w.Phases {
			if w.Phases[i].FeedBroken {
				w.Phases[i].Backfilled = true
			}
		}
	}
	w.Phases = append(w.Phases, p)
}

// WorldCommand is `plumbline demo world init|change`: it prepares the
// shared directory of the story's pods, or starts a new phase of the world.
func WorldCommand(args []string, stdout, stderr io.Writer) error {
	if len(args) == 0 || (args[0] != "init" && args[0] != "change") {
		fmt.Fprintln(stderr, "plumbline demo world: say init (write a new world and the first models) or change (start a new phase)\nRun 'plumbline demo world init --help' for the flags.")
		return ErrUsage
	}
	fs := flag.NewFlagSet("plumbline demo world "+args[0], flag.ContinueOnError)
	dir := fs.String("dir", "/shared", "the directory the story's pods share")
	var p Phase
	if args[0] == "change" {
		fs.BoolVar(&p.Fenwick, "fenwick", false, "the Fenwick depot is open")
		fs.BoolVar(&p.FeedBroken, "feed-broken", false, "the address feed loses addresses")
		fs.BoolVar(&p.Peak, "peak", false, "the pre-holiday peak")
		fs.StringVar(&p.Note, "note", "", "what happened, for the timeline (required)")
	}
	if err := parse(fs, args[1:], stderr); err != nil {
		return err
	}
	now := time.Now()
	if args[0] == "init" {
		if _, err := PrepareWorld(*dir, now); err != nil {
			return err
		}
		if err := writeVendorModel(*dir); err != nil {
			return err
		}
		// The training pods write their models here as a user of their
		// own; like /tmp, each may replace only its own files.
		if err := os.Chmod(filepath.Join(*dir, modelsDir), 0o777|os.ModeSticky); err != nil {
			return fmt.Errorf("make the models directory writable for the training pods: %w", err)
		}
		fmt.Fprintf(stdout, "wrote a new synthetic world and the models late-risk-v0, late-risk-rules and late-risk-vendor to %s\n", *dir)
		return nil
	}
	if p.Note == "" {
		fmt.Fprintln(stderr, "plumbline demo world change: --note is required (what happened, for the timeline)")
		return ErrUsage
	}
	path := filepath.Join(*dir, worldFile)
	w, err := LoadWorld(path)
	if err != nil {
		return err
	}
	p.At = now
	w.Change(p)
	if err := w.Save(path); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "WORLD: %s\n", p.Note)
	return nil
}

// Serve is `plumbline demo serve`, Larkspur's scorer: it loads the model
// at $MODEL_URI (a pod that cannot load it fails), scores the parcels of
// the moment drawn from the world, and exports the monitoring on
// --listen /metrics for Prometheus to scrape; /healthz answers once the
// model is loaded. It runs until it is stopped.
func Serve(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("plumbline demo serve", flag.ContinueOnError)
	world := fs.String("world", "/shared/"+worldFile, "the demo's world file")
	listen := fs.String("listen", ":9100", "address of /metrics and /healthz")
	modelEnv := fs.String("model-env", "MODEL_URI", "the environment variable that holds the artifact URI to serve")
	rate := fs.Float64("parcels-per-second", 100, "parcels this pod scores per second")
	window := fs.Int("window", 1000, "parcels in the quality window")
	labelDelay := fs.Duration("label-delay", 0, "from scoring a parcel to knowing whether it was late (the quality gauge judges the parcels of this long ago)")
	if err := parse(fs, args, stderr); err != nil {
		return err
	}
	if *labelDelay < 0 {
		fmt.Fprintf(stderr, "plumbline demo serve: --label-delay %s: want 0 or more\n", *labelDelay)
		return ErrUsage
	}
	if *rate <= 0 || *window < 10 {
		fmt.Fprintf(stderr, "plumbline demo serve: --parcels-per-second must be above 0 and --window at least 10 (got %g and %d)\n", *rate, *window)
		return ErrUsage
	}
	uri := os.Getenv(*modelEnv)
	if uri == "" {
		return fmt.Errorf("$%s is not set: the serving Deployment's container says which model to serve in it", *modelEnv)
	}
	model, err := ReadArtifact(uri)
	if err != nil {
		return fmt.Errorf("load the model to serve: %w", err)
	}
	w, err := LoadWorld(*world)
	if err != nil {
		return err
	}
	host, _ := os.Hostname()
	s := &scorerServer{world: *world, w: w, model: model, mon: newMonitor(referenceOf(w), *window, *labelDelay, "plumbline demo serve"),
		rng: rand.New(rand.NewPCG(w.Seed, seedOf(host))), out: stdout}
	s.scoredTotal = prometheus.NewCounter(prometheus.CounterOpts{Name: "larkspur_scored_parcels_total",
		Help: "Parcels this pod scored (plumbline demo serve)."})
	s.mon.registry.MustRegister(s.scoredTotal)

	l, err := net.Listen("tcp", *listen)
	if err != nil {
		return fmt.Errorf("--listen %s: %w", *listen, err)
	}
	mux := http.NewServeMux()
	mux.Handle("/metrics", promhttp.HandlerFor(s.mon.registry, promhttp.HandlerOpts{}))
	mux.HandleFunc("/healthz", func(w http.ResponseWriter, _ *http.Request) { fmt.Fprintln(w, "ok") })
	srv := &http.Server{Handler: mux, ReadHeaderTimeout: 5 * time.Second}
	served := make(chan error, 1)
	go func() { served <- srv.Serve(l) }()
	fmt.Fprintf(stdout, "serving %s (%s model) on %s; world %s: %s\n", uri, model.Kind, l.Addr(), *world, w.PhaseAt(time.Now()).Note)

	const tick = 200 * time.Millisecond
	n := max(1, int(*rate*tick.Seconds()))
	t := time.NewTicker(tick)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			sctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
			defer cancel()
			_ = srv.Shutdown(sctx)
			fmt.Fprintf(stdout, "stopped after scoring %d parcels\n", s.scored)
			return nil
		case err := <-served:
			return fmt.Errorf("serve --listen %s: %w", *listen, err)
		case <-t.C:
			s.tick(n)
		}
	}
}

// scorerServer is the state of `plumbline demo serve`.
type scorerServer struct {
	world       string
	w           *World
	worldMod    time.Time
	note        string
	model       *Model
	mon         *monitor
	rng         *rand.Rand
	scoredTotal prometheus.Counter
	scored      int
	out         io.Writer
}

// tick rereads the world when its file changed (a phase began), then
// scores n parcels of the moment.
func (s *scorerServer) tick(n int) {
	if fi, err := os.Stat(s.world); err == nil && !fi.ModTime().Equal(s.worldMod) {
		// A world that cannot be read right now keeps the last one.
		if w, err := LoadWorld(s.world); err == nil {
			s.w, s.worldMod = w, fi.ModTime()
		}
	}
	phase := s.w.PhaseAt(time.Now())
	if phase.Note != s.note {
		s.note = phase.Note
		fmt.Fprintf(s.out, "%s world: %s\n", time.Now().UTC().Format(time.RFC3339), phase.Note)
	}
	batch := make([]scored, n)
	for i := range batch {
		p := phase.Draw(s.rng, "")
		batch[i] = scored{score: s.model.Score(p), late: p.Late, missing: math.IsNaN(p.Address), depot: p.Depot, weight: p.Weight}
	}
	s.mon.add(batch)
	s.scoredTotal.Add(float64(n))
	s.scored += n
}
