package recovery

import (
	"math"
	"strings"
	"testing"

	"discrimen/models"
)

// collectedStudy is a small invented study (a watch officer listening for
// berth numbers on radio channels) with RT, accuracy and EEG.
const collectedStudy = `{
  "name": "berth-watch-collected (invented scenario)",
  "seed": 11,
  "designs": [
    {"name": "two-waits", "cti_ms": [300, 600], "trials_per_cti": 30, "participants": 6,
     "measures": ["rt", "accuracy", "eeg"]}
  ],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [3]}
}`

func collectedDesign(t testing.TB) *models.Design {
	t.Helper()
	s := mustStudy(t, collectedStudy)
	ds, err := s.ExpandedDesigns()
	if err != nil {
		t.Fatal(err)
	}
	return &ds[0]
}

const goodTrials = "participant,cti_ms,cue,report,rt_ms\n" +
	"ward-1 ,300,valid,target,512.5\n" +
	"ward-1,600,invalid,cued,NA\n" +
	"ward-2,600,invalid,other,\n" +
	"ward-2,300,valid,target,480\n"

func TestParseCollectedGood(t *testing.T) {
	d := collectedDesign(t)
	c, err := ParseCollected(d, DataFile{"trials.csv", []byte(goodTrials)}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Participants) != 2 || c.Participants[0].Label != "ward-1" || c.Participants[1].Label != "ward-2" {
		t.Fatalf("participants %+v", c.Participants)
	}
	p := c.Participants[0]
	if len(p.Trials) != 2 || p.Trials[0] != (Trial{CTI: 0, Valid: true, Report: ReportTarget, RTms: 512.5}) {
		t.Fatalf("trials %+v", p.Trials)
	}
	if q := p.Trials[1]; q.CTI != 1 || q.Valid || q.Report != ReportCued || !math.IsNaN(q.RTms) {
		t.Fatalf("second trial %+v", q)
	}
}

// eegRows writes every bin of every CTI of the design for one participant.
func eegRows(t testing.TB, d *models.Design, label string, skip int) string {
	bins, err := DesignBins(d)
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	n := 0
	for c, nb := range bins {
		for k := range nb {
			if n != skip {
				b.WriteString(label + "," + itoa(d.CTIms[c]) + "," + itoa(k*d.EEGBinMs) + ",0.25\n")
			}
			n++
		}
	}
	return b.String()
}

func itoa(v int) string { return integer(v) }

func TestParseCollectedBadData(t *testing.T) {
	d := collectedDesign(t)
	head := "participant,cti_ms,cue,report,rt_ms\n"
	eegHead := "participant,cti_ms,bin_start_ms,value\n"
	full1 := eegRows(t, d, "ward-1", -1)
	cases := []struct {
		name, trials, eeg string
		cols              Columns
		trialsName        string
		want              string
	}{
		{name: "empty file", trials: "", want: "trials.csv: the file is empty; want a header row (participant, cti_ms, cue, report, rt_ms) and a row per trial"},
		{name: "header only", trials: head, want: "trials.csv: no rows after the header"},
		{name: "no participant column", trials: "subj,cti_ms,cue,report,rt_ms\nw,300,valid,target,400\n",
			want: `trials.csv: header, column participant: no column "participant" for participant (the header has subj, cti_ms, cue, report, rt_ms); name the file's column with --columns participant=NAME`},
		{name: "renamed participant column missing", trials: "subj,cti_ms,cue,report,rt_ms\nw,300,valid,target,400\n", cols: Columns{"participant": "sub"},
			want: `trials.csv: header, column sub: no column "sub" for participant (the header has subj, cti_ms, cue, report, rt_ms); --columns gives participant=sub`},
		{name: "report outside the three", trials: head + "w,300,valid,correct,400\n",
			want: `trials.csv: row 1, column report: "correct" is not one of target, cued, other`},
		{name: "cue outside the two", trials: head + "w,300,left,target,400\n",
			want: `trials.csv: row 1, column cue: "left" is not one of valid, invalid`},
		{name: "cued on a valid trial", trials: head + "w,300,valid,target,400\nw,600,valid,cued,NA\n",
			want: `trials.csv: row 2, column report: "cued" on a valid trial (a valid trial has no cued distractor: the target is on the cued stream)`},
		{name: "negative rt", trials: head + "w,300,valid,target,-12\n",
			want: "trials.csv: row 1, column rt_ms: -12 is negative; an RT is the milliseconds from target onset to the response"},
		{name: "non-numeric rt", trials: head + "w,300,valid,target,fast\n",
			want: `trials.csv: row 1, column rt_ms: "fast" is not a number of milliseconds or NA`},
		{name: "rt on a non-target report", trials: head + "w,600,invalid,cued,455\n",
			want: `trials.csv: row 1, column rt_ms: 455 on a report of "cued"; only a target report has an RT in the analysis, write NA`},
		{name: "empty participant", trials: head + ",300,valid,target,400\n",
			want: "trials.csv: row 1, column participant: the participant label is empty"},
		{name: "cti of another design", trials: head + "w,300,valid,target,400\nw,450,valid,target,400\n",
			want: `trials.csv: row 2, column cti_ms: 450 is not a CTI of design "two-waits" (its CTIs: 300, 600 ms); is the file of another design?`},
		{name: "extension", trials: head + "w,300,valid,target,400\n", trialsName: "trials.xlsx",
			want: `trials.xlsx: extension ".xlsx" is not .csv or .tsv (the extension picks the separator)`},
		{name: "ragged row", trials: head + "w,300,valid,target,400\nw,300,valid\n",
			want: "trials.csv: row 2: wrong number of fields"},
		{name: "renamed column in the message", trials: "subj,cti_ms,cue,report,RT\nw,300,valid,target,-3\n", cols: Columns{"participant": "subj", "rt_ms": "RT"},
			want: "trials.csv: row 1, column RT: -3 is negative; an RT is the milliseconds from target onset to the response"},
		{name: "eeg empty", trials: goodTrials, eeg: " ",
			want: "eeg.csv: no rows after the header"},
		{name: "eeg duplicated bin", trials: goodTrials, eeg: eegHead + "ward-1,300,100,0.5\nward-1,300,100,0.6\n",
			want: `eeg.csv: row 2: duplicated bin: participant "ward-1", CTI 300 ms, bin 100 ms is on row 1 too`},
		{name: "eeg participant without trials", trials: goodTrials, eeg: eegHead + "ward-9,300,0,0.5\n",
			want: `eeg.csv: row 1, column participant: participant "ward-9" has no rows in trials.csv`},
		{name: "eeg bin not of the design", trials: goodTrials, eeg: eegHead + "ward-1,300,350,0.5\n",
			want: "eeg.csv: row 1, column bin_start_ms: 350 is not a bin of CTI 300 ms (its bins start at 0, 100, 200 ms from cue onset)"},
		{name: "eeg non-numeric value", trials: goodTrials, eeg: eegHead + "ward-1,300,0,high\n",
			want: `eeg.csv: row 1, column value: "high" is not a finite number`},
		{name: "eeg incomplete", trials: goodTrials, eeg: eegHead + eegRows(t, d, "ward-1", 4),
			want: `eeg.csv: participant "ward-1" has 8 of the design's 9 EEG bins (missing CTI 600 ms bin 100 ms); give every bin of every CTI or none`},
		{name: "eeg cti of another design", trials: goodTrials, eeg: eegHead + full1 + "ward-2,900,0,0.5\n",
			want: `eeg.csv: row 10, column cti_ms: 900 is not a CTI of design "two-waits" (its CTIs: 300, 600 ms); is the file of another design?`},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			name := tc.trialsName
			if name == "" {
				name = "data/trials.csv"
			}
			var eeg *DataFile
			if tc.eeg != "" {
				eeg = &DataFile{"data/eeg.csv", []byte(strings.TrimSpace(tc.eeg) + "\n")}
				if strings.TrimSpace(tc.eeg) == "" {
					eeg.Data = []byte(eegHead)
				}
			}
			c, err := ParseCollected(d, DataFile{name, []byte(tc.trials)}, eeg, tc.cols)
			if err == nil {
				t.Fatalf("no error; parsed %d participants", len(c.Participants))
			}
			if c != nil {
				t.Errorf("data returned beside the error")
			}
			if got := err.Error(); got != tc.want {
				t.Errorf("error\n got: %s\nwant: %s", got, tc.want)
			}
		})
	}
}

func TestParseCollectedEEGOnADesignWithout(t *testing.T) {
	s := mustStudy(t, strings.Replace(collectedStudy, `"measures": ["rt", "accuracy", "eeg"]`, `"measures": ["rt", "accuracy"]`, 1))
	ds, _ := s.ExpandedDesigns()
	_, err := ParseCollected(&ds[0], DataFile{"trials.csv", []byte(goodTrials)}, &DataFile{"eeg.csv", []byte("participant,cti_ms,bin_start_ms,value\nward-1,300,0,1\n")}, nil)
	want := `eeg.csv: design "two-waits" does not measure eeg (its measures: rt, accuracy); leave out the eeg file or add eeg to the design's measures`
	if err == nil || err.Error() != want {
		t.Fatalf("got %v, want %s", err, want)
	}
}

func TestParseCollectedManyProblems(t *testing.T) {
	d := collectedDesign(t)
	var b strings.Builder
	b.WriteString("participant,cti_ms,cue,report,rt_ms\n")
	for range 30 {
		b.WriteString("w,300,valid,maybe,400\n")
	}
	_, err := ParseCollected(d, DataFile{"trials.tsv", []byte(strings.ReplaceAll(b.String(), ",", "\t"))}, nil, nil)
	es, ok := err.(DataErrors)
	if !ok || len(es) != MaxDataErrors || es[19].Row != 20 || es[0].Column != "report" {
		t.Fatalf("got %v", err)
	}
}

func TestParseColumns(t *testing.T) {
	c, err := ParseColumns("participant=subj, rt_ms=RT")
	if err != nil || c.name("participant") != "subj" || c.name("rt_ms") != "RT" || c.name("cue") != "cue" {
		t.Fatalf("%v %v", c, err)
	}
	for spec, want := range map[string]string{
		"subject=subj": `--columns: unknown column "subject" (the format's columns are participant, cti_ms, cue, report, rt_ms, bin_start_ms, value)`,
		"participant":  `--columns: "participant" is not NAME=COLUMN (for example participant=subj)`,
		"cue=c,cue=d":  "--columns: cue is renamed twice",
	} {
		if _, err := ParseColumns(spec); err == nil || err.Error() != want {
			t.Errorf("%s: got %v, want %s", spec, err, want)
		}
	}
}

// TestParseCollectedWithoutRT: a design that does not measure rt needs no
// rt_ms column, and one given is ignored.
func TestParseCollectedWithoutRT(t *testing.T) {
	s := mustStudy(t, strings.Replace(collectedStudy, `"measures": ["rt", "accuracy", "eeg"]`, `"measures": ["accuracy"]`, 1))
	ds, _ := s.ExpandedDesigns()
	c, err := ParseCollected(&ds[0], DataFile{"trials.csv", []byte("cue,report,participant,cti_ms\nvalid,target,w,300\ninvalid,other,w,600\n")}, nil, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(c.Participants) != 1 || len(c.Participants[0].Trials) != 2 || !math.IsNaN(c.Participants[0].Trials[0].RTms) {
		t.Fatalf("%+v", c.Participants)
	}
	if _, err := ParseCollected(&ds[0], DataFile{"trials.csv", []byte(goodTrials)}, nil, nil); err != nil {
		t.Fatalf("an rt_ms column the design does not measure: %v", err)
	}
}

// FuzzParseCollected: no input makes the parser panic, and an error never
// comes with data.
func FuzzParseCollected(f *testing.F) {
	d := collectedDesign(f)
	f.Add([]byte(goodTrials), []byte("participant,cti_ms,bin_start_ms,value\nward-1,300,0,1\n"))
	f.Add([]byte("participant\tcti_ms\tcue\treport\trt_ms\n\"a\tb\",300,valid,target,1e400\n"), []byte(""))
	f.Add([]byte("\ufeffparticipant,cti_ms,cue,report,rt_ms\r\nx,600,invalid,cued,NA\r\n"), []byte("participant,cti_ms,bin_start_ms,value\nx,600,-100,NaN\n"))
	f.Fuzz(func(t *testing.T, trials, eeg []byte) {
		var e *DataFile
		if len(eeg) > 0 {
			e = &DataFile{"eeg.csv", eeg}
		}
		c, err := ParseCollected(d, DataFile{"trials.csv", trials}, e, nil)
		if (err == nil) == (c == nil) {
			t.Fatalf("data %v with error %v", c != nil, err)
		}
	})
}
