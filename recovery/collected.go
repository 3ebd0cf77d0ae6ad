package recovery

import (
	"bytes"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"discrimen/models"
)

// The collected-data format (docs/model.md §10): two tidy tables, CSV or
// TSV by the file's extension.
//
//	trials: participant, cti_ms, cue (valid|invalid), report (target|cued|other), rt_ms
//	eeg:    participant, cti_ms, bin_start_ms, value
//
// rt_ms is NA (or empty) where no RT was recorded or the report was not the
// target. The eeg table is optional; a participant's EEG holds every bin
// of every CTI of the design, or none. Columns may come in any order, and
// columns the format does not name are ignored. Spaces around a cell are
// dropped (a participant label "w1 " is "w1"). Rows are numbered from 1,
// the first row after the header.

// TrialColumns and EEGColumns are the columns of the two tables, in the
// order export writes them.
var (
	TrialColumns = []string{"participant", "cti_ms", "cue", "report", "rt_ms"}
	EEGColumns   = []string{"participant", "cti_ms", "bin_start_ms", "value"}
)

// MaxDataErrors bounds the problems one parse reports; a parse that
// reaches it stops.
const MaxDataErrors = 20

// Columns maps a column of the format to the file's own header name, as
// given by `--columns participant=subj,rt_ms=RT`; an absent column keeps
// its own name.
type Columns map[string]string

// ParseColumns reads a --columns value: comma-separated FORMAT=FILE pairs.
func ParseColumns(spec string) (Columns, error) {
	cols := Columns{}
	if strings.TrimSpace(spec) == "" {
		return cols, nil
	}
	known := append(slices.Clone(TrialColumns), EEGColumns[2:]...)
	for _, pair := range strings.Split(spec, ",") {
		k, v, ok := strings.Cut(pair, "=")
		k, v = strings.TrimSpace(k), strings.TrimSpace(v)
		if !ok || k == "" || v == "" {
			return nil, fmt.Errorf("--columns: %q is not NAME=COLUMN (for example participant=subj)", pair)
		}
		if !slices.Contains(known, k) {
			return nil, fmt.Errorf("--columns: unknown column %q (the format's columns are %s)", k, strings.Join(known, ", "))
		}
		if _, dup := cols[k]; dup {
			return nil, fmt.Errorf("--columns: %s is renamed twice", k)
		}
		cols[k] = v
	}
	return cols, nil
}

func (c Columns) name(col string) string {
	if v, ok := c[col]; ok {
		return v
	}
	return col
}

// DataError is one problem of a data file: the file, the row (1 = the
// first row after the header; 0 = the file as a whole or its header) and
// the column (the file's own name for it; empty when the problem is the
// row's or the file's).
type DataError struct {
	File    string
	Row     int
	Column  string
	Problem string
}

func (e *DataError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	switch {
	case e.Row > 0 && e.Column != "":
		fmt.Fprintf(&b, ": row %d, column %s", e.Row, e.Column)
	case e.Row > 0:
		fmt.Fprintf(&b, ": row %d", e.Row)
	case e.Column != "":
		fmt.Fprintf(&b, ": header, column %s", e.Column)
	}
	b.WriteString(": ")
	b.WriteString(e.Problem)
	return b.String()
}

// DataErrors is every problem a parse found (at most 20), in file and row
// order.
type DataErrors []*DataError

func (es DataErrors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// DataFile is one uploaded or read data file; the extension of Name (.csv
// or .tsv) picks the separator.
type DataFile struct {
	Name string
	Data []byte
}

// CollectedParticipant is one participant of collected data.
type CollectedParticipant struct {
	Label  string
	Trials []Trial
	// EEG holds per CTI the bin means from cue onset; nil when the
	// participant has no EEG.
	EEG [][]float64
}

// Collected is the parsed data of one design, participants in the order
// of their first row in the trials file.
type Collected struct {
	Design       string
	TrialsFile   string
	EEGFile      string
	Participants []CollectedParticipant
}

// DesignBins returns the number of neural bins per CTI of design d (bins
// of eeg_bin_ms from cue onset that end by target onset).
func DesignBins(d *models.Design) ([]int, error) {
	l, err := models.NewListener(d)
	if err != nil {
		return nil, err
	}
	pr := l.NewPrediction()
	out := make([]int, len(pr.Neural))
	for c, b := range pr.Neural {
		out[c] = len(b)
	}
	return out, nil
}

// ParseCollected reads the trials table and, when eeg is not nil, the eeg
// table of design d. It returns DataErrors naming the file, the row and
// the column of every problem it finds (up to 20), and no data unless
// both files parse completely.
func ParseCollected(d *models.Design, trials DataFile, eeg *DataFile, cols Columns) (*Collected, error) {
	bins, err := DesignBins(d)
	if err != nil {
		return nil, err
	}
	p := &dataParser{d: d, cols: cols, bins: bins}
	out := &Collected{Design: d.Name, TrialsFile: filepath.Base(trials.Name)}
	index := map[string]int{}
	p.parseTrials(trials, out, index)
	if eeg != nil {
		out.EEGFile = filepath.Base(eeg.Name)
		if !d.HasMeasure("eeg") {
			p.add(out.EEGFile, 0, "", fmt.Sprintf("design %q does not measure eeg (its measures: %s); leave out the eeg file or add eeg to the design's measures", d.Name, strings.Join(d.Measures, ", ")))
		} else if len(p.errs) == 0 {
			p.parseEEG(*eeg, out, index)
		}
	}
	if len(p.errs) > 0 {
		return nil, p.errs
	}
	return out, nil
}

type dataParser struct {
	d    *models.Design
	cols Columns
	bins []int
	errs DataErrors
}

func (p *dataParser) add(file string, row int, col, problem string) {
	if len(p.errs) < MaxDataErrors {
		p.errs = append(p.errs, &DataError{File: file, Row: row, Column: col, Problem: problem})
	}
}

func (p *dataParser) full() bool { return len(p.errs) >= MaxDataErrors }

// table reads a whole file and maps the wanted columns to their indices;
// ok is false when the file cannot be used at all.
func (p *dataParser) table(f DataFile, want []string) (rows [][]string, idx map[string]int, ok bool) {
	name := filepath.Base(f.Name)
	r := csv.NewReader(bytes.NewReader(f.Data))
	switch strings.ToLower(filepath.Ext(f.Name)) {
	case ".csv":
	case ".tsv":
		r.Comma = '\t'
		r.LazyQuotes = true
	default:
		p.add(name, 0, "", fmt.Sprintf("extension %q is not .csv or .tsv (the extension picks the separator)", filepath.Ext(f.Name)))
		return nil, nil, false
	}
	head, err := r.Read()
	if errors.Is(err, io.EOF) {
		p.add(name, 0, "", fmt.Sprintf("the file is empty; want a header row (%s) and a row per %s", strings.Join(want, ", "), rowNoun(want)))
		return nil, nil, false
	}
	if err != nil {
		p.add(name, 0, "", "cannot read the header: "+csvProblem(err))
		return nil, nil, false
	}
	if len(head) > 0 {
		head[0] = strings.TrimPrefix(head[0], "\ufeff") // a byte-order mark some spreadsheets write
	}
	at := map[string]int{}
	for i, h := range head {
		h = strings.TrimSpace(h)
		if _, dup := at[h]; dup {
			p.add(name, 0, h, "the header names this column twice")
			return nil, nil, false
		}
		at[h] = i
	}
	idx = map[string]int{}
	for _, w := range want {
		col := p.cols.name(w)
		i, found := at[col]
		if !found {
			how := fmt.Sprintf("name the file's column with --columns %s=NAME", w)
			if col != w {
				how = fmt.Sprintf("--columns gives %s=%s", w, col)
			}
			p.add(name, 0, col, fmt.Sprintf("no column %q for %s (the header has %s); %s", col, w, strings.Join(head, ", "), how))
			continue
		}
		idx[w] = i
	}
	if len(idx) < len(want) {
		return nil, nil, false
	}
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			row := len(rows) + 1
			var pe *csv.ParseError
			if errors.As(err, &pe) && pe.StartLine > 1 {
				row = pe.StartLine - 1
			}
			p.add(name, row, "", csvProblem(err))
			return nil, nil, false
		}
		rows = append(rows, rec)
	}
	if len(rows) == 0 {
		p.add(name, 0, "", "no rows after the header")
		return nil, nil, false
	}
	return rows, idx, true
}

func rowNoun(want []string) string {
	if slices.Contains(want, "bin_start_ms") {
		return "bin"
	}
	return "trial"
}

// csvProblem is the reader's message without its own line prefix.
func csvProblem(err error) string {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return pe.Err.Error()
	}
	return err.Error()
}

// ctiIndex reads a cti_ms cell.
func (p *dataParser) ctiIndex(cell string) (int, string) {
	v, err := strconv.ParseFloat(strings.TrimSpace(cell), 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return -1, fmt.Sprintf("%q is not a number of milliseconds", cell)
	}
	for c, ms := range p.d.CTIms {
		if float64(ms) == v {
			return c, ""
		}
	}
	return -1, fmt.Sprintf("%s is not a CTI of design %q (its CTIs: %s ms); is the file of another design?", strings.TrimSpace(cell), p.d.Name, joinInts(p.d.CTIms))
}

func joinInts(x []int) string {
	s := make([]string, len(x))
	for i, v := range x {
		s[i] = strconv.Itoa(v)
	}
	return strings.Join(s, ", ")
}

func (p *dataParser) parseTrials(f DataFile, out *Collected, index map[string]int) {
	name := filepath.Base(f.Name)
	want := TrialColumns[:4]
	hasRT := p.d.HasMeasure("rt")
	if hasRT {
		want = TrialColumns
	}
	rows, idx, ok := p.table(f, want)
	if !ok {
		return
	}
	for ri, rec := range rows {
		if p.full() {
			return
		}
		row := ri + 1
		bad := false
		fail := func(col, problem string) {
			p.add(name, row, p.cols.name(col), problem)
			bad = true
		}
		label := strings.TrimSpace(rec[idx["participant"]])
		if label == "" {
			fail("participant", "the participant label is empty")
		}
		c, problem := p.ctiIndex(rec[idx["cti_ms"]])
		if problem != "" {
			fail("cti_ms", problem)
		}
		var valid bool
		switch cue := strings.TrimSpace(rec[idx["cue"]]); cue {
		case "valid":
			valid = true
		case "invalid":
		default:
			fail("cue", fmt.Sprintf("%q is not one of valid, invalid", cue))
		}
		rep := -1
		switch r := strings.TrimSpace(rec[idx["report"]]); r {
		case "target":
			rep = ReportTarget
		case "cued":
			rep = ReportCued
			if valid {
				fail("report", `"cued" on a valid trial (a valid trial has no cued distractor: the target is on the cued stream)`)
			}
		case "other":
			rep = ReportOther
		default:
			fail("report", fmt.Sprintf("%q is not one of target, cued, other", r))
		}
		rt := math.NaN()
		if hasRT {
			cell := strings.TrimSpace(rec[idx["rt_ms"]])
			if cell != "" && cell != NA {
				v, err := strconv.ParseFloat(cell, 64)
				switch {
				case err != nil || math.IsNaN(v) || math.IsInf(v, 0):
					fail("rt_ms", fmt.Sprintf("%q is not a number of milliseconds or NA", cell))
				case v < 0:
					fail("rt_ms", fmt.Sprintf("%s is negative; an RT is the milliseconds from target onset to the response", cell))
				case rep != ReportTarget && rep >= 0:
					fail("rt_ms", fmt.Sprintf("%s on a report of %q; only a target report has an RT in the analysis, write NA", cell, strings.TrimSpace(rec[idx["report"]])))
				default:
					rt = v
				}
			}
		}
		if bad {
			continue
		}
		i, seen := index[label]
		if !seen {
			i = len(out.Participants)
			index[label] = i
			out.Participants = append(out.Participants, CollectedParticipant{Label: label})
		}
		out.Participants[i].Trials = append(out.Participants[i].Trials, Trial{CTI: c, Valid: valid, Report: rep, RTms: rt})
	}
}

func (p *dataParser) parseEEG(f DataFile, out *Collected, index map[string]int) {
	name := filepath.Base(f.Name)
	rows, idx, ok := p.table(f, EEGColumns)
	if !ok {
		return
	}
	type key struct{ part, cti, bin int }
	seen := map[key]int{}
	got := make([][][]float64, len(out.Participants)) // [participant][cti][bin], NaN = missing
	for ri, rec := range rows {
		if p.full() {
			return
		}
		row := ri + 1
		bad := false
		fail := func(col, problem string) {
			p.add(name, row, p.cols.name(col), problem)
			bad = true
		}
		label := strings.TrimSpace(rec[idx["participant"]])
		pi, known := index[label]
		if !known {
			fail("participant", fmt.Sprintf("participant %q has no rows in %s", label, out.TrialsFile))
		}
		c, problem := p.ctiIndex(rec[idx["cti_ms"]])
		if problem != "" {
			fail("cti_ms", problem)
		}
		b := -1
		bcell := strings.TrimSpace(rec[idx["bin_start_ms"]])
		if bv, err := strconv.ParseFloat(bcell, 64); err != nil || math.IsNaN(bv) || math.IsInf(bv, 0) {
			fail("bin_start_ms", fmt.Sprintf("%q is not a number of milliseconds", bcell))
		} else if c >= 0 {
			w := float64(p.d.EEGBinMs)
			if k := bv / w; k == math.Trunc(k) && k >= 0 && int(k) < p.bins[c] {
				b = int(k)
			} else {
				fail("bin_start_ms", fmt.Sprintf("%s is not a bin of CTI %d ms (its bins start at %s ms from cue onset)", bcell, p.d.CTIms[c], binStarts(p.bins[c], p.d.EEGBinMs)))
			}
		}
		vcell := strings.TrimSpace(rec[idx["value"]])
		v, err := strconv.ParseFloat(vcell, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			fail("value", fmt.Sprintf("%q is not a finite number", vcell))
		}
		if bad {
			continue
		}
		k := key{pi, c, b}
		if first, dup := seen[k]; dup {
			p.add(name, row, "", fmt.Sprintf("duplicated bin: participant %q, CTI %d ms, bin %d ms is on row %d too", label, p.d.CTIms[c], b*p.d.EEGBinMs, first))
			continue
		}
		seen[k] = row
		if got[pi] == nil {
			got[pi] = make([][]float64, len(p.bins))
			for cc, nb := range p.bins {
				got[pi][cc] = make([]float64, nb)
				for j := range got[pi][cc] {
					got[pi][cc][j] = math.NaN()
				}
			}
		}
		got[pi][c][b] = v
	}
	if len(p.errs) > 0 {
		return
	}
	total := 0
	for _, nb := range p.bins {
		total += nb
	}
	for pi, g := range got {
		if g == nil {
			continue
		}
		var missing []string
		have := 0
		for c, bs := range g {
			for b, v := range bs {
				if math.IsNaN(v) {
					missing = append(missing, fmt.Sprintf("CTI %d ms bin %d ms", p.d.CTIms[c], b*p.d.EEGBinMs))
				} else {
					have++
				}
			}
		}
		if len(missing) > 0 {
			more := ""
			if len(missing) > 3 {
				more = fmt.Sprintf(" and %d more", len(missing)-3)
				missing = missing[:3]
			}
			p.add(name, 0, "", fmt.Sprintf("participant %q has %d of the design's %d EEG bins (missing %s%s); give every bin of every CTI or none", out.Participants[pi].Label, have, total, strings.Join(missing, ", "), more))
			continue
		}
		out.Participants[pi].EEG = g
	}
}

func binStarts(n, w int) string {
	s := make([]string, n)
	for i := range s {
		s[i] = strconv.Itoa(i * w)
	}
	if n > 6 {
		return strings.Join(s[:3], ", ") + ", ..., " + s[n-1]
	}
	return strings.Join(s, ", ")
}

// summariseCollected is summarise for a participant of collected data: a
// participant without EEG is fitted on the behavioural measures alone (no
// EEG terms in k, no EEG bins in n).
func summariseCollected(d *models.Design, cp *CollectedParticipant) *sufficientStats {
	s := summarise(d, &Dataset{Design: d.Name, Trials: cp.Trials, EEG: cp.EEG})
	if s.measEEG && cp.EEG == nil {
		s.measEEG, s.eeg, s.nEEG = false, nil, 0
	}
	return s
}
