package recovery

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"strings"

	"discrimen/models"
)

// The tidy tables of a report (README "Outputs"; docs/model.md §9):
//
//	fits.csv         one row per fit (design × generator × participant × candidate)
//	params.csv       one row per fit and free hypothesis parameter of the candidate
//	measurement.csv  one row per fit and measurement term the design measures
//
// each with a JSON sidecar (fits.json, params.json, measurement.json) that
// describes every column by Description, Units and Levels, the keys the
// BIDS specification uses for the sidecars of its tabular files (BIDS
// specification, "Tabular files"). A missing value is written NA, never an
// empty cell. Text cells that a spreadsheet would read as a formula (first
// character =, +, -, @, tab or carriage return) get a leading single quote
// (OWASP, "CSV Injection"); numbers are written as plain numbers.

// NA is the cell of a missing value in every table.
const NA = "NA"

// File is one rendered output file.
type File struct {
	Name string
	Data []byte
}

// Level is one allowed value of a categorical column, as written in the
// CSV, with what it means.
type Level struct {
	Value       string
	Description string
}

// Column describes one column of a table, as its sidecar does.
type Column struct {
	Name        string
	Description string
	Units       string  // empty when the column has no unit
	Levels      []Level // nil unless the column is categorical
}

// Table is one tidy table: its columns and its rows of cells, already
// formatted (NA for missing, text made safe).
type Table struct {
	Name    string // file stem: "fits", "params", "measurement"
	Columns []Column
	Rows    [][]string
}

// SafeText makes a text cell safe to open in a spreadsheet: a value that
// starts with =, +, -, @, a tab or a carriage return gets a leading single
// quote so that it is read as text, not as a formula (OWASP, "CSV
// Injection"). The text "NA" gets one too, so that a name is never read
// as a missing value. Number cells never go through it.
func SafeText(s string) string {
	if s == NA || s != "" && strings.ContainsRune("=+-@\t\r", rune(s[0])) {
		return "'" + s
	}
	return s
}

// cell formatting: every number cell goes through num, integer or boolean.
func num(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return NA
	}
	return strconv.FormatFloat(v, 'g', 10, 64)
}

func integer(v int) string { return strconv.Itoa(v) }

func boolean(v bool) string { return strconv.FormatBool(v) }

func text(s string) string {
	if s == "" {
		return NA
	}
	return SafeText(s)
}

// CSV renders the table with a header row.
func (t Table) CSV() ([]byte, error) {
	var buf bytes.Buffer
	w := csv.NewWriter(&buf)
	head := make([]string, len(t.Columns))
	for i, c := range t.Columns {
		head[i] = c.Name
	}
	if err := w.Write(head); err != nil {
		return nil, err
	}
	for i, row := range t.Rows {
		if len(row) != len(head) {
			return nil, fmt.Errorf("recovery: %s row %d has %d cells, want %d", t.Name, i+1, len(row), len(head))
		}
		if err := w.Write(row); err != nil {
			return nil, err
		}
	}
	w.Flush()
	return buf.Bytes(), w.Error()
}

// Sidecar renders the table's JSON sidecar: one member per column, in
// column order, each with Description, and Units and Levels where they
// apply (Levels maps each value to its meaning).
func (t Table) Sidecar() ([]byte, error) {
	var buf bytes.Buffer
	buf.WriteString("{")
	for i, c := range t.Columns {
		if i > 0 {
			buf.WriteString(",")
		}
		name, err := json.Marshal(c.Name)
		if err != nil {
			return nil, err
		}
		buf.Write(name)
		buf.WriteString(":{")
		desc, err := json.Marshal(c.Description)
		if err != nil {
			return nil, err
		}
		buf.WriteString(`"Description":`)
		buf.Write(desc)
		if c.Units != "" {
			u, err := json.Marshal(c.Units)
			if err != nil {
				return nil, err
			}
			buf.WriteString(`,"Units":`)
			buf.Write(u)
		}
		if len(c.Levels) > 0 {
			buf.WriteString(`,"Levels":{`)
			for j, l := range c.Levels {
				if j > 0 {
					buf.WriteString(",")
				}
				k, err := json.Marshal(l.Value)
				if err != nil {
					return nil, err
				}
				v, err := json.Marshal(l.Description)
				if err != nil {
					return nil, err
				}
				buf.Write(k)
				buf.WriteString(":")
				buf.Write(v)
			}
			buf.WriteString("}")
		}
		buf.WriteString("}")
	}
	buf.WriteString("}")
	var out bytes.Buffer
	if err := json.Indent(&out, buf.Bytes(), "", "  "); err != nil {
		return nil, err
	}
	out.WriteString("\n")
	return out.Bytes(), nil
}

// TableFiles renders the three tables and their sidecars, in the order
// fits.csv, fits.json, params.csv, params.json, measurement.csv,
// measurement.json.
func (r *Report) TableFiles() ([]File, error) {
	tables, err := r.Tables()
	if err != nil {
		return nil, err
	}
	var files []File
	for _, t := range tables {
		c, err := t.CSV()
		if err != nil {
			return nil, err
		}
		s, err := t.Sidecar()
		if err != nil {
			return nil, err
		}
		files = append(files, File{t.Name + ".csv", c}, File{t.Name + ".json", s})
	}
	return files, nil
}

// FitsCSV renders fits.csv alone.
func (r *Report) FitsCSV() ([]byte, error) {
	t, err := r.fitsTable()
	if err != nil {
		return nil, err
	}
	return t.CSV()
}

// Tables builds fits, params and measurement from the report's fits.
func (r *Report) Tables() ([]Table, error) {
	f, err := r.fitsTable()
	if err != nil {
		return nil, err
	}
	p, err := r.paramsTable()
	if err != nil {
		return nil, err
	}
	m, err := r.measurementTable()
	if err != nil {
		return nil, err
	}
	return []Table{f, p, m}, nil
}

// checkFits reports a report whose per-design fits do not line up with
// its designs (a report decoded from JSON has none).
func (r *Report) checkFits() error {
	if len(r.Fits) != len(r.Designs) {
		return fmt.Errorf("recovery: the report holds fits of %d designs for %d designs (tables need a report from Run or Assemble)", len(r.Fits), len(r.Designs))
	}
	return nil
}

// The key columns every table starts with.
func (r *Report) keyColumns() []Column {
	var designs, hyps []Level
	for _, d := range r.Designs {
		designs = append(designs, Level{SafeText(d.Name), fmt.Sprintf("design %q: %d synthetic participants per generator; measures %s", d.Name, d.Participants, strings.Join(d.Measures, ", "))})
	}
	for i, h := range r.Hypotheses {
		fam := ""
		if i < len(r.Families) {
			fam = r.Families[i]
		}
		hyps = append(hyps, Level{SafeText(h), fmt.Sprintf("hypothesis %q, precision family %s", h, fam)})
	}
	return []Column{
		{Name: "design", Description: "The design (a vary block's variants are designs of their own). Text starting with =, +, -, @, tab or CR, and the text NA, is written with a leading single quote, here and in every text cell.", Levels: designs},
		{Name: "generator", Description: "The hypothesis that generated the dataset.", Levels: hyps},
		{Name: "participant", Description: "The synthetic participant, numbered from 0 within its design and generator. Participants are drawn from streams that do not depend on the design, so a number is the same synthetic person in every design (docs/model.md §4)."},
		{Name: "candidate", Description: "The hypothesis fitted to the dataset.", Levels: hyps},
	}
}

func keyCells(f *Fit) []string {
	return []string{text(f.Design), text(f.Generator), integer(f.Participant), text(f.Candidate)}
}

func boolLevels(yes, no string) []Level {
	return []Level{{"true", yes}, {"false", no}}
}

// fitStatuses are the values of Fit.Status.
var fitStatuses = []Level{
	{"converged", "the search's stopping rule was met"},
	{"evaluation limit", "the search stopped at its evaluation limit"},
	{"no finite value", "no finite likelihood was found (the fit failed)"},
	{"no search (nothing free)", "the candidate and the measurement model have no searched parameter; ln L is computed once"},
}

func (r *Report) fitsTable() (Table, error) {
	if err := r.checkFits(); err != nil {
		return Table{}, err
	}
	cols := r.keyColumns()
	cols = append(cols,
		Column{Name: "loglik", Description: "Maximised log-likelihood ln L̂ (natural log) from exact predictions, over the candidate's free parameters and the measurement terms. NA for a failed fit."},
		Column{Name: "k", Description: "Free parameters counted by the criteria: the candidate's free hypothesis parameters plus every measurement term the design measures, profiled or searched (docs/model.md §5)."},
		Column{Name: "n", Description: "Observations the likelihood uses: RTs of correct reports (rt), reports (accuracy), EEG bins (eeg), summed over trials and CTIs (docs/model.md §5)."},
		Column{Name: "aic", Description: "AIC = 2k − 2 ln L̂. NA for a failed fit."},
		Column{Name: "aicc", Description: "AICc = AIC + 2k(k+1)/(n−k−1). NA for a failed fit or when n ≤ k+1."},
		Column{Name: "bic", Description: "BIC = k ln n − 2 ln L̂. NA for a failed fit."},
	)
	for _, c := range []Criterion{BICCriterion, AICCriterion, AICcCriterion} {
		cols = append(cols, Column{Name: "win_" + string(c), Description: fmt.Sprintf("This candidate's share of the dataset's win under %s: 1 when it alone has the smallest %s, 1/m when m candidates lie within %g of the smallest, 0 otherwise (docs/model.md §6). The shares of one dataset sum to 1; NA for every candidate when no fit of the dataset has a finite %s.", c.Label(), c.Label(), TieTolerance, c.Label())})
	}
	cols = append(cols,
		Column{Name: "converged", Description: "Whether the search that gave the estimate met its stopping rule.", Levels: boolLevels("met", "not met (see status)")},
		Column{Name: "status", Description: "How the search that gave the estimate ended.", Levels: fitStatuses},
		Column{Name: "failed", Description: "Whether the fit failed (no finite likelihood); a failed fit never wins.", Levels: boolLevels("failed", "a finite fit")},
		Column{Name: "error", Description: "Why a failed fit failed; NA for every other fit."},
		Column{Name: "evaluations", Description: "Likelihood evaluations of the search on the prediction grid."},
		Column{Name: "polished", Description: "Whether the estimate was refined on exact predictions (candidates within 2 criterion units of the dataset's best, and every self-fit).", Levels: boolLevels("refined", "not refined")},
		Column{Name: "truth_loglik", Description: "For a self-fit (candidate = generator): ln L at the generating hypothesis parameters with the measurement terms fitted. NA for other fits."},
		Column{Name: "below_truth", Description: fmt.Sprintf("For a self-fit: whether its ln L̂ ended more than %g below truth_loglik (or the fit failed), i.e. the search missed the maximum. NA for other fits.", truthTolerance), Levels: boolLevels("the search ended below the truth", "at or above the truth")},
	)
	t := Table{Name: "fits", Columns: cols}
	for _, design := range r.Fits {
		for _, grp := range design {
			shares := map[Criterion][]float64{}
			for _, c := range Criteria {
				vals := make([]float64, len(grp.Fits))
				for j := range grp.Fits {
					vals[j] = c.Of(&grp.Fits[j])
				}
				if len(vals) == 0 {
					continue
				}
				if sh, failed := WinShares(vals, TieTolerance); !failed {
					shares[c] = sh
				}
			}
			for j := range grp.Fits {
				f := &grp.Fits[j]
				row := keyCells(f)
				row = append(row, num(f.LogL), integer(f.K), integer(f.N), num(f.AIC), num(f.AICc), num(f.BIC))
				for _, c := range []Criterion{BICCriterion, AICCriterion, AICcCriterion} {
					if sh := shares[c]; sh != nil {
						row = append(row, num(sh[j]))
					} else {
						row = append(row, NA)
					}
				}
				below, truth := NA, NA
				if f.Candidate == f.Generator && !math.IsNaN(f.TruthLogL) {
					truth = num(f.TruthLogL)
					below = boolean(f.Failed || f.TruthLogL-f.LogL > truthTolerance)
				}
				row = append(row, boolean(f.Converged), text(f.Status), boolean(f.Failed), text(f.Error), integer(f.Evaluations),
					boolean(f.Polished), truth, below)
				t.Rows = append(t.Rows, row)
			}
		}
	}
	return t, nil
}

// hypothesis returns the study file's hypothesis of that name.
func (r *Report) hypothesis(name string) (models.Hypothesis, bool) {
	if r.StudyFile == nil {
		return models.Hypothesis{}, false
	}
	for _, h := range r.StudyFile.Hypotheses {
		if h.Name == name {
			return h, true
		}
	}
	return models.Hypothesis{}, false
}

func (r *Report) paramsTable() (Table, error) {
	if err := r.checkFits(); err != nil {
		return Table{}, err
	}
	// The parameter column's levels: every free parameter name, with the
	// hypotheses it is free in.
	var names []string
	in := map[string][]string{}
	for _, hn := range r.Hypotheses {
		h, ok := r.hypothesis(hn)
		if !ok {
			continue
		}
		for _, p := range h.FreeParams() {
			if in[p] == nil {
				names = append(names, p)
			}
			in[p] = append(in[p], hn)
		}
	}
	var levels []Level
	for _, p := range names {
		levels = append(levels, Level{SafeText(p), "free in " + strings.Join(in[p], ", ")})
	}
	const units = "the parameter's own (docs/model.md §2: seconds for times, 1/s for slope and rate, gain units for levels)"
	cols := r.keyColumns()
	cols = append(cols,
		Column{Name: "parameter", Description: "A free hypothesis parameter of the candidate (fixed parameters are not estimated and have no row).", Levels: levels},
		Column{Name: "true_value", Description: "The value that generated the dataset. NA when the candidate is not the generator (its parameters have no true value).", Units: units},
		Column{Name: "estimate", Description: "The maximum-likelihood estimate. NA for a failed fit.", Units: units},
		Column{Name: "range_min", Description: "Lower end of the parameter's range in the study file (the fit's bound).", Units: units},
		Column{Name: "range_max", Description: "Upper end of the parameter's range in the study file (the fit's bound).", Units: units},
		Column{Name: "at_bound", Description: fmt.Sprintf("Whether the estimate lies within %g of the range's width of an end of the range. NA for a failed fit.", atBoundEdge), Levels: boolLevels("at an end of the range", "inside the range")},
		Column{Name: "low", Description: "Lower end of the 95% profile-likelihood interval: the values whose profile −ln L lies within χ²₁(0.95)/2 = 1.9207 of the minimum (docs/model.md §5). Self-fits only; NA for other fits and for a self-fit without an interval.", Units: units},
		Column{Name: "high", Description: "Upper end of the 95% profile-likelihood interval (as low).", Units: units},
		Column{Name: "open_low", Description: "Whether the interval reaches the lower end of the range, so that low is where the search stopped looking rather than a bound of the set. NA without an interval.", Levels: boolLevels("open: reaches range_min", "closed")},
		Column{Name: "open_high", Description: "Whether the interval reaches the upper end of the range (as open_low). NA without an interval.", Levels: boolLevels("open: reaches range_max", "closed")},
		Column{Name: "pieces", Description: "Number of connected parts of the interval set: 1 when it is one interval from low to high; 2 or more when values between low and high lie outside it (their ends are in report.json under recovery_points[].intervals[].pieces). NA without an interval."},
		Column{Name: "exact_rise_low", Description: "Rise of the exact −ln L (exact predictions, measurement terms re-fitted) at low over the fit's exact minimum; near 1.9207 where the grid is good. NA at an open end or without an interval.", Units: "ln-likelihood units"},
		Column{Name: "exact_rise_high", Description: "As exact_rise_low, at high.", Units: "ln-likelihood units"},
		Column{Name: "se", Description: "Standard error from the Hessian of −ln L on the prediction grid, a secondary figure beside the profile interval. Self-fits only; NA otherwise or where it cannot be computed.", Units: units},
		Column{Name: "se_reliable", Description: "Whether the fit's standard errors passed their reliability checks. NA for other fits than self-fits.", Levels: boolLevels("reliable", "not reliable")},
	)
	t := Table{Name: "params", Columns: cols}
	for _, design := range r.Fits {
		for _, grp := range design {
			for j := range grp.Fits {
				f := &grp.Fits[j]
				self := f.Candidate == f.Generator
				h, hok := r.hypothesis(f.Candidate)
				for i, name := range f.Names {
					row := keyCells(f)
					row = append(row, text(name))
					truth := NA
					if self && i < len(grp.Truth.Free) {
						truth = num(grp.Truth.Free[i])
					}
					est := math.NaN()
					if !f.Failed && i < len(f.Params) {
						est = f.Params[i]
					}
					lo, hi := math.NaN(), math.NaN()
					if p, ok := h.Params[name]; hok && ok && p.Min != nil && p.Max != nil {
						lo, hi = *p.Min, *p.Max
					}
					atBound := NA
					if !math.IsNaN(est) && lo < hi {
						atBound = boolean(AtBoundShare([]float64{est}, lo, hi) == 1)
					}
					row = append(row, truth, num(est), num(lo), num(hi), atBound)
					if i < len(f.Intervals) && !(math.IsNaN(float64(f.Intervals[i].Low)) && math.IsNaN(float64(f.Intervals[i].High))) {
						iv := f.Intervals[i]
						row = append(row, num(float64(iv.Low)), num(float64(iv.High)), boolean(iv.OpenLow), boolean(iv.OpenHigh),
							integer(len(iv.Pieces)), num(float64(iv.ExactLow)), num(float64(iv.ExactHigh)))
					} else {
						row = append(row, NA, NA, NA, NA, NA, NA, NA)
					}
					se := math.NaN()
					if i < len(f.SE) {
						se = f.SE[i]
					}
					rel := NA
					if self {
						rel = boolean(f.SEReliable)
					}
					row = append(row, num(se), rel)
					t.Rows = append(t.Rows, row)
				}
			}
		}
	}
	return t, nil
}

// measurementTerm is one measurement term of the fits.
type measurementTerm struct {
	name, measure string
	profiled      bool
	units, what   string
	of            func(m *Measurement) float64
}

var measurementTerms = []measurementTerm{
	{"rt_base", "rt", true, "ms", "RT offset: RT = rt_base + rt_scale·RT_model + N(0, rt_sd²)", func(m *Measurement) float64 { return m.RTBase }},
	{"rt_scale", "rt", true, "dimensionless", "RT scale on the model's RT", func(m *Measurement) float64 { return m.RTScale }},
	{"rt_sd", "rt", true, "ms", "standard deviation of the RT noise", func(m *Measurement) float64 { return m.RTSD }},
	{"lapse", "accuracy", false, "probability", "lapse rate: a report is a uniform guess with this probability", func(m *Measurement) float64 { return m.Lapse }},
	{"eeg_offset", "eeg", true, "EEG signal units", "EEG bin mean offset", func(m *Measurement) float64 { return m.EEGOffset }},
	{"eeg_gain", "eeg", true, "EEG signal units per unit of expected precision", "EEG gain on the model's neural signal", func(m *Measurement) float64 { return m.EEGGain }},
	{"eeg_sd", "eeg", true, "EEG signal units", "marginal standard deviation of the AR(1) EEG noise", func(m *Measurement) float64 { return m.EEGSD }},
	{"eeg_ar", "eeg", false, "dimensionless", "AR(1) coefficient of the EEG noise between bins", func(m *Measurement) float64 { return m.EEGAR }},
}

func (r *Report) measurementTable() (Table, error) {
	if err := r.checkFits(); err != nil {
		return Table{}, err
	}
	var terms []Level
	for _, m := range measurementTerms {
		how := "searched"
		if m.profiled {
			how = "profiled in closed form"
		}
		terms = append(terms, Level{m.name, fmt.Sprintf("%s (measure %s; %s; units: %s)", m.what, m.measure, how, m.units)})
	}
	cols := r.keyColumns()
	cols = append(cols,
		Column{Name: "term", Description: "A measurement term of the design's measures (rt: rt_base, rt_scale, rt_sd; accuracy: lapse; eeg: eeg_offset, eeg_gain, eeg_sd, eeg_ar); terms of measures the design does not take have no row.", Levels: terms},
		Column{Name: "profiled", Description: "Whether the term is profiled in closed form (weighted least squares; Prais–Winsten for the EEG) or searched with the hypothesis parameters (docs/model.md §5).", Levels: boolLevels("profiled in closed form", "searched")},
		Column{Name: "estimate", Description: "The term's maximum-likelihood estimate in this fit. NA for a failed fit.", Units: "the term's (see term)"},
		Column{Name: "true_value", Description: "The value the synthetic participant was generated with (drawn from the design's measurement prior); the same for every candidate fitted to the dataset.", Units: "the term's (see term)"},
	)
	t := Table{Name: "measurement", Columns: cols}
	for d, design := range r.Fits {
		measures := map[string]bool{}
		for _, m := range r.Designs[d].Measures {
			measures[m] = true
		}
		for _, grp := range design {
			for j := range grp.Fits {
				f := &grp.Fits[j]
				for _, m := range measurementTerms {
					if !measures[m.measure] {
						continue
					}
					est := math.NaN()
					if !f.Failed {
						est = m.of(&f.Measurement)
					}
					row := keyCells(f)
					row = append(row, m.name, boolean(m.profiled), num(est), num(m.of(&grp.Truth.Measurement)))
					t.Rows = append(t.Rows, row)
				}
			}
		}
	}
	return t, nil
}
