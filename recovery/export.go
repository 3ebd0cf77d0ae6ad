package recovery

import (
	"fmt"
	"math"
	"strconv"

	"discrimen/models"
)

// MaxExportParticipants bounds one export.
const MaxExportParticipants = 100000

// full formats a number at full precision: the shortest text that parses
// back to the same float64 (strconv's shortest round-trip formatting).
func full(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return NA
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

// Export writes the synthetic datasets of generator's participants
// 0..n−1 under design, the same datasets RunShard makes and fits, in the
// collected-data format: trials.csv, eeg.csv when the design measures eeg,
// and truth.csv (the generating values), each with its JSON sidecar.
// participant holds the participant's index, as in the run's fits.csv.
func Export(s *models.Study, design, generator string, n int) ([]File, error) {
	if n < 1 || n > MaxExportParticipants {
		return nil, fmt.Errorf("participants must be in 1..%d, got %d", MaxExportParticipants, n)
	}
	designs, err := s.ExpandedDesigns()
	if err != nil {
		return nil, err
	}
	d, err := findDesign(designs, design)
	if err != nil {
		return nil, err
	}
	gi, err := findHypothesis(s, generator)
	if err != nil {
		return nil, err
	}
	gen := s.Hypotheses[gi]
	l, err := models.NewListener(d)
	if err != nil {
		return nil, err
	}
	ws, pr := l.NewWorkspace(), l.NewPrediction()
	trials := TrialsTable(d)
	eeg := EEGTable()
	truth := truthTable(gen)
	for p := range n {
		ds, err := synthetic(s.Seed, d, gen, p, l, pr, ws)
		if err != nil {
			return nil, err
		}
		label := strconv.Itoa(p)
		for _, t := range ds.Trials {
			cue := "valid"
			if !t.Valid {
				cue = "invalid"
			}
			trials.Rows = append(trials.Rows, []string{label, integer(d.CTIms[t.CTI]), cue, reportNames[t.Report], full(t.RTms)})
		}
		for c, bins := range ds.EEG {
			for b, v := range bins {
				eeg.Rows = append(eeg.Rows, []string{label, integer(d.CTIms[c]), integer(b * d.EEGBinMs), full(v)})
			}
		}
		for i, name := range gen.FreeParams() {
			truth.Rows = append(truth.Rows, []string{label, text(gen.Name), "hypothesis", text(name), full(ds.Truth.Free[i])})
		}
		m := ds.Truth.Measurement
		for _, term := range designTerms(d) {
			truth.Rows = append(truth.Rows, []string{label, text(gen.Name), "measurement", term.name, full(term.of(&m))})
		}
	}
	tables := []Table{trials, truth}
	if d.HasMeasure("eeg") {
		tables = []Table{trials, eeg, truth}
	}
	var out []File
	for _, t := range tables {
		csvData, err := t.CSV()
		if err != nil {
			return nil, err
		}
		side, err := t.Sidecar()
		if err != nil {
			return nil, err
		}
		out = append(out, File{Name: t.Name + ".csv", Data: csvData}, File{Name: t.Name + ".json", Data: side})
	}
	return out, nil
}

var reportNames = [...]string{ReportTarget: "target", ReportCued: "cued", ReportOther: "other"}

// TrialsTable is the trials table of the collected-data format, without
// rows; its sidecar documents the columns.
func TrialsTable(d *models.Design) Table {
	cols := []Column{
		{Name: "participant", Description: "participant label (any non-empty text); exported synthetic participants carry their index in the run"},
		{Name: "cti_ms", Description: "cue-target interval of the trial, one of the design's cti_ms", Units: "ms"},
		{Name: "cue", Description: "whether the target was on the cued stream", Levels: []Level{{"valid", "target on the cued stream"}, {"invalid", "target on another stream"}}},
		{Name: "report", Description: "what the participant reported", Levels: []Level{{"target", "the target stream's item"}, {"cued", "the cued stream's item (invalid trials only)"}, {"other", "any other item"}}},
	}
	if d == nil || d.HasMeasure("rt") {
		cols = append(cols, Column{Name: "rt_ms", Description: "response time from target onset; NA where none was recorded or the report was not the target", Units: "ms"})
	}
	return Table{Name: "trials", Columns: cols}
}

// EEGTable is the eeg table of the collected-data format, without rows.
func EEGTable() Table {
	return Table{Name: "eeg", Columns: []Column{
		{Name: "participant", Description: "participant label, as in the trials table"},
		{Name: "cti_ms", Description: "cue-target interval of the condition", Units: "ms"},
		{Name: "bin_start_ms", Description: "start of the bin from cue onset; bins are eeg_bin_ms wide and end by target onset", Units: "ms"},
		{Name: "value", Description: "the preprocessed bin mean of the participant's neural signal in this condition and bin"},
	}}
}

func truthTable(gen models.Hypothesis) Table {
	return Table{Name: "truth", Columns: []Column{
		{Name: "participant", Description: "participant label, as in trials.csv"},
		{Name: "generator", Description: "the hypothesis that generated the participant (" + gen.Name + ")"},
		{Name: "kind", Description: "what the parameter is", Levels: []Level{{"hypothesis", "a free parameter of the generator"}, {"measurement", "a measurement term of the design's measures"}}},
		{Name: "parameter", Description: "parameter name"},
		{Name: "value", Description: "the true value the data were generated with, at full precision"},
	}}
}

// designTerms lists the measurement terms of the design's measures.
func designTerms(d *models.Design) []measurementTerm {
	var out []measurementTerm
	for _, t := range measurementTerms {
		if d.HasMeasure(t.measure) {
			out = append(out, t)
		}
	}
	return out
}
