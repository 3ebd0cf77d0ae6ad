package recovery

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"

	"discrimen/models"
)

// Report categories of one trial.
const (
	ReportTarget = 0 // the target item
	ReportCued   = 1 // the item on the cued stream (invalid trials only)
	ReportOther  = 2 // any other item
)

// Trial is one row of the trial table a real study records.
type Trial struct {
	CTI    int     // index into the design's cti_ms
	Valid  bool    // target on the cued stream
	Report int     // ReportTarget, ReportCued or ReportOther
	RTms   float64 // response time in ms on correct trials when RT is measured, NaN otherwise
}

// Measurement holds one participant's measurement parameters (model.md §4).
type Measurement struct {
	RTBase, RTScale, RTSD, Lapse, EEGOffset, EEGGain, EEGSD, EEGAR float64
}

// Truth is what generated a dataset. Fits never see it.
type Truth struct {
	Free        []float64 // the generator's free parameters, in FreeParams order
	Measurement Measurement
}

// Dataset is one synthetic participant's data: the trial table and the EEG
// bin means per CTI condition, exactly what a study would record.
type Dataset struct {
	Design      string
	Generator   string
	Participant int
	Trials      []Trial
	EEG         [][]float64 // per CTI: bin means from cue onset; nil without eeg
	Truth       Truth
}

// drawTruth draws a participant's true parameters from the generator's
// generating distributions and the design's measurement priors.
func drawTruth(r *rand.Rand, h models.Hypothesis, d *models.Design) Truth {
	names := h.FreeParams()
	t := Truth{Free: make([]float64, len(names))}
	for i, n := range names {
		t.Free[i] = h.Params[n].Quantile(uniform01(r))
	}
	m := &d.Measurement
	t.Measurement = Measurement{
		RTBase:    m.RTBase.Quantile(uniform01(r)),
		RTScale:   m.RTScale.Quantile(uniform01(r)),
		RTSD:      m.RTSD.Quantile(uniform01(r)),
		Lapse:     m.Lapse.Quantile(uniform01(r)),
		EEGOffset: m.EEGOffset.Quantile(uniform01(r)),
		EEGGain:   m.EEGGain.Quantile(uniform01(r)),
		EEGSD:     m.EEGSD.Quantile(uniform01(r)),
		EEGAR:     m.EEGAR.Quantile(uniform01(r)),
	}
	return t
}

// Simulate makes the dataset of participant p of generator h under design d
// from exact predictions pr at the participant's true parameters:
//
//	correct ~ Bernoulli((1−lapse)·acc + lapse/V); misdirected likewise
//	rt = rt_base + rt_scale·RT + N(0, rt_sd²) on correct trials
//	y_b = eeg_offset + eeg_gain·e_b + η_b, η stationary AR(1) with sd eeg_sd
func Simulate(r *rand.Rand, d *models.Design, h models.Hypothesis, p int, truth Truth, pr *models.Prediction) *Dataset {
	m := truth.Measurement
	V := float64(d.Items)
	ds := &Dataset{Design: d.Name, Generator: h.Name, Participant: p, Truth: truth}
	hasRT := d.HasMeasure("rt")
	ds.Trials = make([]Trial, 0, len(d.CTIms)*d.TrialsPerCTI)
	for c := range d.CTIms {
		for range d.TrialsPerCTI {
			valid := r.Float64() < d.Validity
			cls := &pr.Valid
			if !valid {
				cls = &pr.Invalid
			}
			pT := (1-m.Lapse)*cls.Accuracy[c] + m.Lapse/V
			pC := 0.0
			if !valid {
				pC = (1-m.Lapse)*cls.Misdirected[c] + m.Lapse/V
			}
			u := r.Float64()
			rep := ReportOther
			switch {
			case u < pT:
				rep = ReportTarget
			case u < pT+pC:
				rep = ReportCued
			}
			t := Trial{CTI: c, Valid: valid, Report: rep, RTms: math.NaN()}
			noise := r.NormFloat64()
			if hasRT && rep == ReportTarget {
				t.RTms = m.RTBase + m.RTScale*cls.RTms[c] + m.RTSD*noise
			}
			ds.Trials = append(ds.Trials, t)
		}
	}
	if d.HasMeasure("eeg") {
		ds.EEG = make([][]float64, len(d.CTIms))
		innov := m.EEGSD * math.Sqrt(1-m.EEGAR*m.EEGAR)
		for c, bins := range pr.Neural {
			y := make([]float64, len(bins))
			eta := 0.0
			for b, e := range bins {
				if b == 0 {
					eta = m.EEGSD * r.NormFloat64()
				} else {
					eta = m.EEGAR*eta + innov*r.NormFloat64()
				}
				y[b] = m.EEGOffset + m.EEGGain*e + eta
			}
			ds.EEG[c] = y
		}
	}
	return ds
}

// truthRand is the stream of participant p's true parameters. It does not
// depend on the design, so every design of a study (and every variant of a
// vary block) meets the same synthetic participants: design comparisons
// are paired (common random numbers).
func truthRand(seed uint64, generator string, p int) *rand.Rand {
	return streamRand(seed, "participant", generator, strconv.Itoa(p))
}

// datasetRand is the stream for participant p's data under one design.
func datasetRand(seed uint64, design, generator string, p int, purpose string) *rand.Rand {
	return streamRand(seed, "dataset", design, generator, strconv.Itoa(p), purpose)
}

// synthetic makes the dataset of participant p of generator gen under
// design d: the truth from the participant's stream, the exact
// predictions at it (listener l, scratch pr and ws) and the data from the
// dataset's stream. RunShard and Export both call it, so an exported
// participant is the one a run fits.
func synthetic(seed uint64, d *models.Design, gen models.Hypothesis, p int, l *models.Listener, pr *models.Prediction, ws *models.Workspace) (*Dataset, error) {
	truth := drawTruth(truthRand(seed, gen.Name, p), gen, d)
	prec, err := models.NewPrecision(gen, d, truth.Free)
	if err != nil {
		return nil, err
	}
	l.Predict(prec, pr, ws)
	return Simulate(datasetRand(seed, d.Name, gen.Name, p, "trials"), d, gen, p, truth, pr), nil
}

// StudyDesign returns the study's expanded design of that name, or an
// error that lists the designs.
func StudyDesign(s *models.Study, name string) (*models.Design, error) {
	designs, err := s.ExpandedDesigns()
	if err != nil {
		return nil, err
	}
	return findDesign(designs, name)
}

// findDesign finds an expanded design by name.
func findDesign(designs []models.Design, name string) (*models.Design, error) {
	names := make([]string, len(designs))
	for i := range designs {
		if designs[i].Name == name {
			return &designs[i], nil
		}
		names[i] = designs[i].Name
	}
	return nil, fmt.Errorf("the study has no design %q (its designs: %s)", name, strings.Join(names, ", "))
}

// findHypothesis finds a hypothesis of the study by name.
func findHypothesis(s *models.Study, name string) (int, error) {
	names := make([]string, len(s.Hypotheses))
	for i, h := range s.Hypotheses {
		if h.Name == name {
			return i, nil
		}
		names[i] = h.Name
	}
	return -1, fmt.Errorf("the study has no hypothesis %q (its hypotheses: %s)", name, strings.Join(names, ", "))
}
