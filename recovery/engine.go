package recovery

import (
	"context"
	"discrimen/internal/parallel"
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"strconv"
	"sync/atomic"
	"time"

	"discrimen/models"
)

// Version is written into every report.
const Version = "0.1.0"

// surrogatePoints is the number of random points at which each grid's
// interpolation error is measured.
const surrogatePoints = 40

// Compiled is a study ready to run: its designs expanded, the agent
// compiled per design and every candidate's prediction grid built. It is
// read-only afterwards and shared by all shards of a process.
type Compiled struct {
	Study     *models.Study
	Designs   []models.Design
	listeners []*models.Listener
	grids     [][]*PredictionGrid // [design][hypothesis]
	Surrogate [][]SurrogateError
	// Predictions holds each hypothesis's predictions at its reference
	// values, per design, for the report's curves.
	Predictions [][]models.HypothesisPrediction
	GridSeconds float64
}

// Compile expands the study's designs and builds the prediction grids of
// every candidate with the given number of goroutines (0 = all cores).
func Compile(ctx context.Context, s *models.Study, workers int) (*Compiled, error) {
	return compile(ctx, s, "", workers)
}

// CompileDesign is Compile for one design of the study (its expanded
// name), as the fit of collected data needs: the grids are the ones
// Compile builds for that design.
func CompileDesign(ctx context.Context, s *models.Study, design string, workers int) (*Compiled, error) {
	return compile(ctx, s, design, workers)
}

func compile(ctx context.Context, s *models.Study, only string, workers int) (*Compiled, error) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	start := time.Now()
	designs, err := s.ExpandedDesigns()
	if err != nil {
		return nil, err
	}
	if only != "" {
		d, err := findDesign(designs, only)
		if err != nil {
			return nil, err
		}
		designs = []models.Design{*d}
	}
	c := &Compiled{Study: s, Designs: designs}
	for di := range c.Designs {
		d := &c.Designs[di]
		l, err := models.NewListener(d)
		if err != nil {
			return nil, err
		}
		c.listeners = append(c.listeners, l)
		var row []*PredictionGrid
		var errRow []SurrogateError
		for _, h := range s.Hypotheses {
			grid, err := BuildPredictionGrid(ctx, l, d, h, workers)
			if err != nil {
				return nil, err
			}
			row = append(row, grid)
		}
		errRow = make([]SurrogateError, len(row))
		err = parallel.For(ctx, len(row), workers, func(_, hi int) error {
			errRow[hi] = row[hi].MeasureError(s.Seed, surrogatePoints)
			return nil
		})
		if err != nil {
			return nil, err
		}
		c.grids = append(c.grids, row)
		c.Surrogate = append(c.Surrogate, errRow)
		preds, err := models.PredictDesign(s, d, nil)
		if err != nil {
			return nil, err
		}
		c.Predictions = append(c.Predictions, preds)
	}
	c.GridSeconds = time.Since(start).Seconds()
	return c, ctx.Err()
}

// ShardSpec is one unit of work: a block of synthetic participants
// [From, To) of one generator under one design, fitted by every candidate.
type ShardSpec struct {
	Index     int `json:"index"`
	Design    int `json:"design"`
	Generator int `json:"generator"`
	From      int `json:"from"`
	To        int `json:"to"`
}

// Fits is the number of fits the shard runs for h candidates.
func (s ShardSpec) Fits(h int) int { return models.Fits(s.To-s.From, 1, h) }

// Plan splits the study into shards of at most size participants, in a
// fixed order (design, generator, participant).
func (c *Compiled) Plan(size int) []ShardSpec { return planShards(c.Study, c.Designs, size) }

// PlanStudy is Plan without compiling the study (no prediction grids): it
// expands the designs and splits them, so a planner need not build grids.
func PlanStudy(s *models.Study, size int) ([]ShardSpec, error) {
	designs, err := s.ExpandedDesigns()
	if err != nil {
		return nil, err
	}
	return planShards(s, designs, size), nil
}

func planShards(s *models.Study, designs []models.Design, size int) []ShardSpec {
	if size < 1 {
		size = 1
	}
	var out []ShardSpec
	for di := range designs {
		for gi := range s.Hypotheses {
			n := designs[di].Participants
			for from := 0; from < n; from += size {
				out = append(out, ShardSpec{Index: len(out), Design: di, Generator: gi, From: from, To: min(n, from+size)})
			}
		}
	}
	return out
}

// TotalFits counts every fit of the study.
func (c *Compiled) TotalFits() int { return models.DesignsFits(c.Designs, len(c.Study.Hypotheses)) }

// ParticipantResult is one synthetic participant: its truth and one fit per
// candidate, in hypothesis order.
type ParticipantResult struct {
	Participant int
	Truth       Truth
	Fits        []Fit
}

// ShardResult is what a shard produces; it depends only on the study, the
// seed and the spec, never on the worker that ran it.
type ShardResult struct {
	Spec         ShardSpec
	Participants []ParticipantResult
	// Seconds is the wall time the shard took (not part of the report's
	// deterministic content).
	Seconds float64
}

// ErrCanceled is returned when a run stops because its context ended.
var ErrCanceled = errors.New("recovery: run canceled")

// RunShard generates the shard's participants and fits every candidate to
// each. progress, if not nil, is called with the number of fits finished
// after each participant. Cancellation is checked between participants.
func (c *Compiled) RunShard(ctx context.Context, spec ShardSpec, progress func(fits int)) (*ShardResult, error) {
	if spec.Design < 0 || spec.Design >= len(c.Designs) || spec.Generator < 0 || spec.Generator >= len(c.Study.Hypotheses) {
		return nil, fmt.Errorf("recovery: shard %d names design %d, generator %d outside the study", spec.Index, spec.Design, spec.Generator)
	}
	start := time.Now()
	d := &c.Designs[spec.Design]
	gen := c.Study.Hypotheses[spec.Generator]
	l := c.listeners[spec.Design]
	ws, pr := l.NewWorkspace(), l.NewPrediction()
	fitters := make([]*fitter, len(c.grids[spec.Design]))
	for j, grid := range c.grids[spec.Design] {
		fitters[j] = newFitter(grid)
	}
	res := &ShardResult{Spec: spec}
	for p := spec.From; p < spec.To; p++ {
		if ctx.Err() != nil {
			return nil, fmt.Errorf("%w: %v", ErrCanceled, ctx.Err())
		}
		ds, err := synthetic(c.Study.Seed, d, gen, p, l, pr, ws)
		if err != nil {
			return nil, err
		}
		truth := ds.Truth
		sum := summarise(d, ds)
		pres := ParticipantResult{Participant: p, Truth: truth}
		for _, f := range fitters {
			fit := f.fit(sum)
			fit.Design, fit.Generator, fit.Participant = d.Name, gen.Name, p
			fit.TruthLogL = math.NaN()
			pres.Fits = append(pres.Fits, fit)
		}
		// Every candidate in contention is polished, and alike by its
		// place: the deep polish for the self-fit (its ln L is checked
		// against the truth's) and for every candidate within deepWindow
		// of the best, the quick one for the rest within
		// contentionWindow. A polish can move a fit into a closer window,
		// so the rule is applied until nothing changes; no winner is
		// decided between fits polished to different depths.
		for changed := true; changed; {
			changed = false
			for j, want := range polishWanted(pres.Fits, spec.Generator) {
				fj := &pres.Fits[j]
				if fj.Failed || want == 0 || (want == 1 && fj.Polished) || (want == 2 && fj.deep) {
					continue
				}
				fitters[j].polish(sum, fj, want == 2)
				changed = true
			}
		}
		self := &pres.Fits[spec.Generator]
		fs := fitters[spec.Generator]
		fs.finishSelf(sum, self)
		self.TruthLogL = fs.truthLogL(sum, truth.Free, pr)
		res.Participants = append(res.Participants, pres)
		if progress != nil {
			progress(len(fitters))
		}
	}
	res.Seconds = time.Since(start).Seconds()
	return res, nil
}

// Options configure an in-process run.
type Options struct {
	// Workers is the number of goroutines (0 = all cores).
	Workers int
	// ShardSize is the number of participants per shard (0 = 10).
	ShardSize int
	// Progress, if not nil, receives (fits done, fits total) as the run
	// goes: (0, total) once the grids are built and fitting starts, then
	// after each participant's fits, from several goroutines at once.
	Progress func(done, total int)
}

// Run runs a whole study in this process: compile, every shard in
// parallel, assemble. The report depends only on the study and its seed.
func Run(ctx context.Context, s *models.Study, opt Options) (*Report, error) {
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	start := time.Now()
	c, err := Compile(ctx, s, workers)
	if err != nil {
		return nil, err
	}
	size := opt.ShardSize
	if size <= 0 {
		size = 10
	}
	specs := c.Plan(size)
	total := c.TotalFits()
	var done atomic.Int64
	if opt.Progress != nil {
		opt.Progress(0, total) // fitting starts: the clock of any rate
	}
	results := make([]*ShardResult, len(specs))
	err = parallel.For(ctx, len(specs), workers, func(_, i int) error {
		var err error
		results[i], err = c.RunShard(ctx, specs[i], func(n int) {
			d := done.Add(int64(n))
			if opt.Progress != nil {
				opt.Progress(int(d), total)
			}
		})
		return err
	})
	if ctx.Err() != nil {
		return nil, fmt.Errorf("%w: %v", ErrCanceled, ctx.Err())
	}
	if err != nil {
		return nil, err
	}
	fitStart := time.Now()
	rep, err := c.Assemble(results)
	if err != nil {
		return nil, err
	}
	var shardSeconds float64
	for _, r := range results {
		shardSeconds += r.Seconds
	}
	rep.Timing = Timing{
		TotalSeconds:    time.Since(start).Seconds(),
		GridSeconds:     c.GridSeconds,
		ShardSeconds:    shardSeconds,
		AssembleSeconds: time.Since(fitStart).Seconds(),
		Fits:            total,
		Workers:         workers,
	}
	if rep.Timing.TotalSeconds > 0 {
		rep.Timing.FitsPerSecond = float64(total) / rep.Timing.TotalSeconds
	}
	return rep, nil
}

// sortResults orders shard results by their index and checks that the set
// is complete and has no duplicates.
func (c *Compiled) sortResults(results []*ShardResult, want int) ([]*ShardResult, error) {
	rs := make([]*ShardResult, 0, len(results))
	seen := map[string]bool{}
	for _, r := range results {
		if r == nil {
			return nil, errors.New("recovery: assemble: a shard result is missing")
		}
		key := strconv.Itoa(r.Spec.Design) + "/" + strconv.Itoa(r.Spec.Generator) + "/" + strconv.Itoa(r.Spec.From)
		if seen[key] {
			continue // a duplicate shard adds nothing
		}
		seen[key] = true
		rs = append(rs, r)
	}
	sort.Slice(rs, func(i, j int) bool {
		a, b := rs[i].Spec, rs[j].Spec
		if a.Design != b.Design {
			return a.Design < b.Design
		}
		if a.Generator != b.Generator {
			return a.Generator < b.Generator
		}
		return a.From < b.From
	})
	n := 0
	for _, r := range rs {
		n += len(r.Participants)
	}
	if n != want {
		return nil, fmt.Errorf("recovery: assemble: %d participants in the shard results, want %d", n, want)
	}
	return rs, nil
}
