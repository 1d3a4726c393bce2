package demo

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"net/url"
	"os"
	"path/filepath"
	"time"

	"gonum.org/v1/gonum/mat"
)

// The demo's model: a logistic regression of lateness on the parcel's
// features, trained for real on the world's synthetic parcels. Its artifact
// is a small JSON file at a file:// URI. A rule-based artifact (the line's
// fallback) is the same file with fixed rules instead of fitted weights.

// ArtifactSchema names the artifact format.
const ArtifactSchema = "plumbline.dev/demo-model/v1"

// Model is a trained (or rule-based) scorer.
type Model struct {
	Schema string `json:"schema"`
	// Kind is "logistic" or "rules".
	Kind string `json:"kind"`
	// Numeric features are standardised with Mean and Scale; a missing
	// address confidence is imputed with its mean and flagged.
	Mean  [3]float64 `json:"mean"`
	Scale [3]float64 `json:"scale"`
	// Depots are the depots seen in training, one weight each; an unseen
	// depot gets none.
	Depots []string `json:"depots"`
	// Weights: intercept, distance, weight, address, address missing, then
	// one per depot, then one per depot for its distance slope.
	Weights []float64 `json:"weights"`
	// Rows is how many parcels the model was fitted on, DataFrom and DataTo
	// their span.
	Rows     int       `json:"rows"`
	DataFrom time.Time `json:"dataFrom"`
	DataTo   time.Time `json:"dataTo"`
}

func (m *Model) features(x Parcel) []float64 {
	addr, missing := x.Address, 0.0
	if math.IsNaN(addr) {
		addr, missing = m.Mean[2], 1
	}
	f := []float64{1,
		(x.Distance - m.Mean[0]) / m.Scale[0],
		(x.Weight - m.Mean[1]) / m.Scale[1],
		(addr - m.Mean[2]) / m.Scale[2],
		missing}
	for _, d := range m.Depots {
		if x.Depot == d {
			f = append(f, 1)
		} else {
			f = append(f, 0)
		}
	}
	// Each depot its own distance slope: routes differ by depot.
	for _, d := range m.Depots {
		if x.Depot == d {
			f = append(f, f[1])
		} else {
			f = append(f, 0)
		}
	}
	return f
}

// Score is the model's probability that a parcel is late.
func (m *Model) Score(x Parcel) float64 {
	if m.Kind == "rules" {
		// Larkspur's old rule of thumb: far and badly addressed is risky.
		addr := x.Address
		if math.IsNaN(addr) {
			addr = 0.5
		}
		s := 0.1
		if x.Distance > 20 {
			s += 0.3
		}
		if addr < 0.6 {
			s += 0.3
		}
		return s
	}
	z := 0.0
	for i, f := range m.features(x) {
		z += m.Weights[i] * f
	}
	return sigmoid(z)
}

// TrainModel fits a logistic regression by Newton's method (iteratively
// reweighted least squares) with a small ridge penalty so one-hot columns
// and separable data stay finite.
func TrainModel(parcels []Parcel) (*Model, error) {
	if len(parcels) < 100 {
		return nil, fmt.Errorf("only %d parcels to train on; at least 100 are needed", len(parcels))
	}
	m := &Model{Schema: ArtifactSchema, Kind: "logistic", Rows: len(parcels)}
	seen := map[string]bool{}
	var sum, sq [3]float64
	var nAddr float64
	for _, x := range parcels {
		seen[x.Depot] = true
		sum[0] += x.Distance
		sq[0] += x.Distance * x.Distance
		sum[1] += x.Weight
		sq[1] += x.Weight * x.Weight
		if !math.IsNaN(x.Address) {
			sum[2] += x.Address
			sq[2] += x.Address * x.Address
			nAddr++
		}
	}
	for _, d := range allDepots {
		if seen[d] {
			m.Depots = append(m.Depots, d)
		}
	}
	counts := [3]float64{float64(len(parcels)), float64(len(parcels)), nAddr}
	for i := range m.Mean {
		if counts[i] == 0 {
			m.Mean[i], m.Scale[i] = 0, 1
			continue
		}
		m.Mean[i] = sum[i] / counts[i]
		m.Scale[i] = math.Sqrt(math.Max(sq[i]/counts[i]-m.Mean[i]*m.Mean[i], 1e-12))
	}
	k := 5 + 2*len(m.Depots)
	n := len(parcels)
	xs := mat.NewDense(n, k, nil)
	y := make([]float64, n)
	for i, p := range parcels {
		xs.SetRow(i, m.features(p))
		if p.Late {
			y[i] = 1
		}
	}
	w := mat.NewVecDense(k, nil)
	const ridge = 1.0
	for iter := 0; iter < 25; iter++ {
		// Gradient g = X'(y - p) - ridge*w; Hessian H = X'WX + ridge*I.
		g := mat.NewVecDense(k, nil)
		h := mat.NewSymDense(k, nil)
		for i := 0; i < n; i++ {
			row := xs.RawRowView(i)
			z := 0.0
			for j, f := range row {
				z += w.AtVec(j) * f
			}
			p := sigmoid(z)
			r, s := y[i]-p, p*(1-p)
			for a := 0; a < k; a++ {
				g.SetVec(a, g.AtVec(a)+r*row[a])
				for b := a; b < k; b++ {
					h.SetSym(a, b, h.At(a, b)+s*row[a]*row[b])
				}
			}
		}
		for a := 1; a < k; a++ { // the intercept is not penalised
			g.SetVec(a, g.AtVec(a)-ridge*w.AtVec(a))
			h.SetSym(a, a, h.At(a, a)+ridge)
		}
		var step mat.VecDense
		if err := step.SolveVec(h, g); err != nil {
			return nil, fmt.Errorf("fit the logistic regression: %w", err)
		}
		w.AddVec(w, &step)
		if mat.Norm(&step, math.Inf(1)) < 1e-8 {
			break
		}
	}
	m.Weights = make([]float64, k)
	for j := range m.Weights {
		m.Weights[j] = w.AtVec(j)
	}
	return m, nil
}

// ArtifactPath is the local file of a file:// artifact URI.
func ArtifactPath(uri string) (string, error) {
	u, err := url.Parse(uri)
	if err != nil || u.Scheme != "file" || u.Path == "" {
		return "", fmt.Errorf("artifact URI %q: the demo stores models at file:// URIs", uri)
	}
	return u.Path, nil
}

// WriteArtifact writes a model to its artifact URI.
func WriteArtifact(uri string, m *Model) error {
	path, err := ArtifactPath(uri)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
		return fmt.Errorf("create model directory: %w", err)
	}
	return replaceJSON(path, m)
}

// ReadArtifact loads a model from its artifact URI.
func ReadArtifact(uri string) (*Model, error) {
	path, err := ArtifactPath(uri)
	if err != nil {
		return nil, err
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read model %s: %w", uri, err)
	}
	var m Model
	if err := json.Unmarshal(b, &m); err != nil {
		return nil, fmt.Errorf("model %s: %w", uri, err)
	}
	switch {
	case m.Schema != ArtifactSchema:
		return nil, fmt.Errorf("model %s has schema %q, want %q", uri, m.Schema, ArtifactSchema)
	case m.Kind == "rules":
	case m.Kind != "logistic":
		return nil, fmt.Errorf("model %s has kind %q, want logistic or rules", uri, m.Kind)
	case len(m.Weights) != 5+2*len(m.Depots):
		return nil, errors.New("model " + uri + " has the wrong number of weights for its depots")
	}
	return &m, nil
}
