package datacheck

import (
	"errors"
	"hash/maphash"
	"io"
	"math"
	"math/rand/v2"
	"sync"
	"sync/atomic"

	"plumbline.dev/plumbline/internal/tools/table"
)

// batchRows is how many rows the reader hands the workers at a time.
const batchRows = 1024

// batch is rows read, shared read-only by the workers until each is done.
type batch struct {
	cells   []table.Cell // row-major, ncols per row
	pos     []int64      // each row's Pos, for naming it later
	n       int
	pending atomic.Int32
}

// scanned is what reading a whole file found besides the column figures.
type scanned struct {
	rows int64
	// malformed rows (table.RowError) were skipped and counted.
	malformed      int64
	firstMalformed string
	// truncated: the last row was malformed, the mark of a file cut off.
	truncated      bool
	truncatedWhere string
}

// task is one worker's share of the work on a batch: a column, or the
// duplicate-row and duplicate-id hashing.
type task interface {
	add(b *batch, ncols int)
}

// scan reads a file once: a reader goroutine fills batches, and each worker
// runs its tasks on every batch in order, so every task sees the rows in
// file order and no state is shared between workers. Memory is bounded by
// the batches in flight (2 per worker, plus one).
func scan(r table.Reader, workers [][]task) (scanned, error) {
	ncols := len(r.Columns())
	var out scanned
	free := make(chan *batch, 2*len(workers)+1)
	for i := 0; i < cap(free); i++ {
		free <- &batch{cells: make([]table.Cell, batchRows*ncols), pos: make([]int64, batchRows)}
	}
	chans := make([]chan *batch, len(workers))
	var wg sync.WaitGroup
	for i, tasks := range workers {
		chans[i] = make(chan *batch, 2)
		wg.Add(1)
		go func(in <-chan *batch, tasks []task) {
			defer wg.Done()
			for b := range in {
				for _, t := range tasks {
					t.add(b, ncols)
				}
				if b.pending.Add(-1) == 0 {
					free <- b
				}
			}
		}(chans[i], tasks)
	}
	send := func(b *batch) {
		if b.n == 0 {
			free <- b
			return
		}
		b.pending.Store(int32(len(chans)))
		for _, c := range chans {
			c <- b
		}
	}
	var fatal error
	lastBad := ""
	for done := false; !done; {
		b := <-free
		b.n = 0
		for b.n < batchRows {
			cells, err := r.Next()
			var rowErr *table.RowError
			if errors.As(err, &rowErr) {
				out.malformed++
				if out.firstMalformed == "" {
					out.firstMalformed = rowErr.Error()
				}
				lastBad = rowErr.Error()
				continue
			}
			if errors.Is(err, io.EOF) {
				done = true
				break
			}
			if err != nil {
				fatal, done = err, true
				break
			}
			lastBad = ""
			copy(b.cells[b.n*ncols:(b.n+1)*ncols], cells)
			b.pos[b.n] = r.Pos()
			b.n++
			out.rows++
		}
		send(b)
	}
	for _, c := range chans {
		close(c)
	}
	wg.Wait()
	if lastBad != "" {
		out.truncated, out.truncatedWhere = true, lastBad
	}
	return out, fatal
}

// plan spreads tasks over n workers, the costliest first onto the least
// loaded worker, so the workers finish together.
func plan(tasks []task, cost func(task) int, n int) [][]task {
	if n < 1 {
		n = 1
	}
	if n > len(tasks) {
		n = max(len(tasks), 1)
	}
	out := make([][]task, n)
	load := make([]int, n)
	order := make([]int, len(tasks))
	for i := range order {
		order[i] = i
	}
	// A stable insertion sort by cost, costliest first: the task lists
	// are short.
	for i := 1; i < len(order); i++ {
		for j := i; j > 0 && cost(tasks[order[j]]) > cost(tasks[order[j-1]]); j-- {
			order[j], order[j-1] = order[j-1], order[j]
		}
	}
	for _, i := range order {
		w := 0
		for k := 1; k < n; k++ {
			if load[k] < load[w] {
				w = k
			}
		}
		out[w] = append(out[w], tasks[i])
		load[w] += cost(tasks[i])
	}
	return out
}

// reservoir keeps a uniform random sample of at most k values of a stream,
// by Li's "Algorithm L": after the first k values it draws how many values
// to skip, so a long stream costs O(k log(n/k)) random draws.
type reservoir struct {
	k    int
	vals []float64
	n    int64
	next int64
	w    float64
	rng  *rand.Rand
}

func newReservoir(k int, seed uint64, stream uint64) reservoir {
	return reservoir{k: k, rng: rand.New(rand.NewPCG(seed, stream))}
}

func (r *reservoir) u() float64 { return 1 - r.rng.Float64() } // in (0, 1]

func (r *reservoir) skip() int64 {
	return int64(math.Floor(math.Log(r.u())/math.Log(1-r.w))) + 1
}

func (r *reservoir) add(x float64) {
	r.n++
	if len(r.vals) < r.k {
		r.vals = append(r.vals, x)
		if len(r.vals) == r.k {
			r.w = math.Exp(math.Log(r.u()) / float64(r.k))
			r.next = r.n + r.skip()
		}
		return
	}
	if r.n < r.next {
		return
	}
	r.vals[r.rng.IntN(r.k)] = x
	r.w *= math.Exp(math.Log(r.u()) / float64(r.k))
	r.next = r.n + r.skip()
}

// example is the first row a finding was seen in, and the value there (or,
// for a duplicate, the row it repeats).
type example struct {
	pos, first int64
	value      string
	set        bool
}

func (e *example) note(pos int64, value string) {
	if !e.set {
		e.pos, e.value, e.set = pos, value, true
	}
}

func (e *example) noteRepeat(pos, first int64) {
	if !e.set {
		e.pos, e.first, e.set = pos, first, true
	}
}

// colScan gathers one column's figures over a file.
type colScan struct {
	name string
	idx  int    // the column's cell index in this file
	typ  string // Numeric, Categorical, Ignore; "" while inferring
	// bounds of a numeric column, when the schema has them.
	lo, hi *float64

	rows, missing int64
	firstMissing  example

	// Numbers read (numeric, or inferring).
	numbers, typeErrors int64
	firstTypeError      example
	outOfRange          int64
	firstOutOfRange     example
	min, max            float64
	sample              reservoir
	giveUpNumbers       bool // inferring: clearly text

	// Categories: counts of known categories (categorical); while
	// inferring (or with no categories in the schema), of every value up
	// to MaxCategories.
	index       map[string]int
	counts      []int64
	seen        map[string]int64
	overflow    bool
	unseen      int64
	firstUnseen example
	unseenTop   map[string]int64 // the unseen values, up to MaxCategories
}

func (c *colScan) add(b *batch, ncols int) {
	for r := 0; r < b.n; r++ {
		c.cell(b.cells[r*ncols+c.idx], b.pos[r])
	}
}

func (c *colScan) cell(cell table.Cell, pos int64) {
	c.rows++
	if cell.IsNull() {
		c.missing++
		c.firstMissing.note(pos, "")
		return
	}
	switch c.typ {
	case Numeric:
		c.number(cell, pos)
	case Categorical:
		c.category(cell, pos)
	case "":
		if !c.giveUpNumbers {
			c.number(cell, pos)
			nonNull := c.rows - c.missing
			if nonNull >= 1000 && c.typeErrors*2 > nonNull {
				c.giveUpNumbers = true
				c.sample.vals = nil
			}
		}
		if !c.overflow {
			c.countSeen(text(cell))
		}
	}
}

func text(cell table.Cell) string { return table.Trim(cell.S) }

func (c *colScan) number(cell table.Cell, pos int64) {
	x, ok := cell.Float()
	if !ok {
		c.typeErrors++
		c.firstTypeError.note(pos, cell.S)
		return
	}
	if c.numbers == 0 || x < c.min {
		c.min = x
	}
	if c.numbers == 0 || x > c.max {
		c.max = x
	}
	c.numbers++
	if c.lo != nil && x < *c.lo || c.hi != nil && x > *c.hi {
		c.outOfRange++
		c.firstOutOfRange.note(pos, cell.S)
	}
	c.sample.add(x)
}

func (c *colScan) countSeen(v string) {
	if _, ok := c.seen[v]; !ok && len(c.seen) >= MaxCategories {
		c.overflow = true
		c.seen = nil
		return
	}
	c.seen[v]++
}

func (c *colScan) category(cell table.Cell, pos int64) {
	v := text(cell)
	if c.index == nil {
		// No categories named: count every value.
		if !c.overflow {
			c.countSeen(v)
		}
		return
	}
	if i, ok := c.index[v]; ok {
		c.counts[i]++
		return
	}
	c.unseen++
	c.firstUnseen.note(pos, v)
	if _, ok := c.unseenTop[v]; ok || len(c.unseenTop) < MaxCategories {
		c.unseenTop[v]++
	}
}

// dupScan finds duplicate rows (every cell equal) and duplicate ids. It
// keeps a 64-bit hash and the first row of each: 2 map entries of about 40
// bytes per row, up to maxTracked rows; past that it stops tracking and
// says so. Two different rows share a hash with a chance of about n²/2⁶⁵
// (3e-8 for a million rows), which would count one false duplicate.
type dupScan struct {
	id         int // cell index of the id column, or -1
	rows       map[uint64]int64
	ids        map[uint64]int64
	dupRows    int64
	firstDup   example
	dupIDs     int64
	firstDupID example
	seed       maphash.Seed
	tracked    int64
	stopped    bool
}

// maxTracked bounds the rows dupScan tracks.
const maxTracked = 20_000_000

func newDupScan(id int) *dupScan {
	return &dupScan{id: id, rows: map[uint64]int64{}, ids: map[uint64]int64{}, seed: maphash.MakeSeed()}
}

func (d *dupScan) add(b *batch, ncols int) {
	var h maphash.Hash
	h.SetSeed(d.seed)
	for r := 0; r < b.n; r++ {
		if d.tracked >= maxTracked {
			d.stopped = true
			return
		}
		d.tracked++
		row := b.cells[r*ncols : (r+1)*ncols]
		h.Reset()
		for _, c := range row {
			h.WriteByte(byte(c.Kind))
			h.WriteString(c.S)
			h.WriteByte(0)
		}
		sum := h.Sum64()
		if first, ok := d.rows[sum]; ok {
			d.dupRows++
			d.firstDup.noteRepeat(b.pos[r], first)
		} else {
			d.rows[sum] = b.pos[r]
		}
		if d.id < 0 || row[d.id].IsNull() {
			continue
		}
		key := maphash.String(d.seed, text(row[d.id]))
		if first, ok := d.ids[key]; ok {
			d.dupIDs++
			d.firstDupID.noteRepeat(b.pos[r], first)
		} else {
			d.ids[key] = b.pos[r]
		}
	}
}
