package demo

import (
	"encoding/json"
	"fmt"
	"hash/fnv"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"time"

	"plumbline.dev/plumbline/internal/tools/outfile"
)

// The world of the demo: the parcels Larkspur Parcels (a fictional courier)
// ships, and whether each is late. Everything here is synthetic: invented
// depots, invented distributions, an invented rule for lateness. The demo
// moves the world through phases in compressed time; the trainer, the golden
// set and the serving simulator all draw their parcels from it, so a model
// trained in one phase meets the next phase in production.

// Phase is how the world is from a moment on.
type Phase struct {
	At time.Time `json:"at"`
	// Fenwick: the new Fenwick depot is open. It takes 40% of the parcels,
	// serves rural routes (long distances that its rural vans handle well)
	// and is short of vans for heavy parcels.
	Fenwick bool `json:"fenwick"`
	// FeedBroken: the address feed fails for a share of the parcels, whose
	// address confidence is then missing.
	FeedBroken bool `json:"feedBroken"`
	// Peak: the pre-holiday peak. Many more heavy parcels, and lateness is
	// driven by weight (vans fill up) more than by distance or address.
	Peak bool `json:"peak"`
	// Backfilled: the addresses the feed lost in this phase were restored
	// in the warehouse afterwards. Live traffic saw them missing; data read
	// later (training, checks, golden sets) has them.
	Backfilled bool `json:"backfilled,omitempty"`
	// Note says what happened, for the timeline.
	Note string `json:"note"`
}

// World is the timeline of phases, oldest first; it is written to a file
// that the demo's Job processes read.
type World struct {
	Seed   uint64  `json:"seed"`
	Phases []Phase `json:"phases"`
}

// PhaseAt is the phase in force at t (the first one before any).
func (w *World) PhaseAt(t time.Time) Phase {
	p := w.Phases[0]
	for _, q := range w.Phases[1:] {
		if q.At.After(t) {
			break
		}
		p = q
	}
	return p
}

// Save writes the world where the Job processes read it.
func (w *World) Save(path string) error {
	return replaceJSON(path, w)
}

// replaceJSON writes v as indented JSON to path through a temporary file,
// so another process never reads half of it.
func replaceJSON(path string, v any) error {
	tmp := path + ".tmp"
	if err := outfile.WriteJSON(tmp, filepath.Base(path), v); err != nil {
		return err
	}
	if err := os.Rename(tmp, path); err != nil {
		return fmt.Errorf("replace %s: %w", path, err)
	}
	return nil
}

// LoadWorld reads a world file.
func LoadWorld(path string) (*World, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read world: %w", err)
	}
	var w World
	if err := json.Unmarshal(b, &w); err != nil {
		return nil, fmt.Errorf("world file %s: %w", filepath.Base(path), err)
	}
	if len(w.Phases) == 0 {
		return nil, fmt.Errorf("world file %s has no phases", filepath.Base(path))
	}
	return &w, nil
}

// Parcel is one delivery: its features as the scorer sees them and whether
// it arrived late.
type Parcel struct {
	ID       string
	Depot    string
	Distance float64 // km
	Weight   float64 // kg
	// Address is the address feed's confidence in [0, 1]; NaN when the feed
	// failed for this parcel.
	Address float64
	Late    bool
}

var (
	oldDepots = []string{"harbour", "ashby", "brook"}
	allDepots = []string{"harbour", "ashby", "brook", "fenwick"}
)

// Draw draws one parcel of a phase.
func (p Phase) Draw(rng *rand.Rand, id string) Parcel {
	x := Parcel{ID: id}
	if p.Fenwick && rng.Float64() < 0.4 {
		x.Depot = "fenwick"
	} else {
		x.Depot = oldDepots[rng.IntN(len(oldDepots))]
	}
	// Distance: town depots a few km to ~30 km; Fenwick's rural routes
	// longer.
	mean := 2.3
	if x.Depot == "fenwick" {
		mean = 3.3
	}
	x.Distance = math.Min(math.Exp(mean+0.5*rng.NormFloat64()), 120)
	// Weight: mostly light; the peak brings many heavy parcels.
	shape := 2.0
	if p.Peak {
		shape = 4.0
	}
	x.Weight = math.Min(gamma(rng, shape)*1.8, 40)
	x.Address = beta(rng, 6, 2)
	if p.FeedBroken && rng.Float64() < 0.3 {
		x.Address = math.NaN()
	}
	x.Late = rng.Float64() < sigmoid(p.lateLogit(x))
	return x
}

// lateLogit is the invented truth: the log-odds that a parcel is late.
func (p Phase) lateLogit(x Parcel) float64 {
	addr := x.Address
	if math.IsNaN(addr) {
		addr = 0.5 // the parcel still has an address; only the feed lost it
	}
	if p.Peak {
		// Vans fill up: heavy parcels wait, and town routes jam while the
		// long rural runs go by the trunk network.
		return -1.2 + 0.35*(x.Weight-6) - 0.15*(x.Distance-12) + 1.0*(0.75-addr)
	}
	if x.Depot == "fenwick" {
		// Its rural vans are punctual however far they go.
		return -1.8 + 6.0*(0.75-addr)
	}
	z := -1.5 + 0.2*(x.Distance-12) + 6.0*(0.75-addr)
	if x.Depot == "ashby" {
		z += 0.3
	}
	return z
}

// Sample draws n parcels of the world between from and to as the
// warehouse holds them, each at a time spread evenly over the span, so
// every phase contributes by its length.
func (w *World) Sample(from, to time.Time, n int, seed uint64) []Parcel {
	rng := rand.New(rand.NewPCG(w.Seed, seed))
	out := make([]Parcel, n)
	span := to.Sub(from)
	for i := range out {
		t := from.Add(time.Duration(float64(span) * (float64(i) + 0.5) / float64(n)))
		p := w.PhaseAt(t)
		if p.Backfilled {
			p.FeedBroken = false
		}
		out[i] = p.Draw(rng, fmt.Sprintf("P%d-%06d", seed%100000, i))
	}
	return out
}

// seedOf turns a name into a seed, so each Job draws its own parcels.
func seedOf(s string) uint64 {
	h := fnv.New64a()
	_, _ = h.Write([]byte(s))
	return h.Sum64()
}

func sigmoid(z float64) float64 { return 1 / (1 + math.Exp(-z)) }

// gamma draws from a Gamma(shape, 1) distribution (Marsaglia and Tsang).
func gamma(rng *rand.Rand, shape float64) float64 {
	d := shape - 1.0/3
	c := 1 / math.Sqrt(9*d)
	for {
		x := rng.NormFloat64()
		v := 1 + c*x
		if v <= 0 {
			continue
		}
		v = v * v * v
		u := rng.Float64()
		if math.Log(u) < 0.5*x*x+d-d*v+d*math.Log(v) {
			return d * v
		}
	}
}

func beta(rng *rand.Rand, a, b float64) float64 {
	x, y := gamma(rng, a), gamma(rng, b)
	return x / (x + y)
}
