package main

import (
	"bytes"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"
)

var progressLine = regexp.MustCompile(`^discrimen: ([0-9,]+) of ([0-9,]+) fits \(([0-9]+)%\)(, rate not measured yet|, done in .+|, ([0-9.,]+) fits/s, (about .+ left|done in .+))$`)

// TestProgressPlain: on a non-terminal, one line per 10% of the fits, in
// our layout; no rate before 2 s and 1% of the fits, however fast the
// first fits finish; then the mean rate since fitting began and the time
// left at that rate.
func TestProgressPlain(t *testing.T) {
	var buf bytes.Buffer
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	now := t0
	p := newProgress(&buf, false, func() time.Time { return now })
	p.update(0, 1000)
	// A burst: 50 fits finish 1 ms after the start (the case that made a
	// library's first reading claim 50,000 fits/s), then 50 fits per
	// second until 1000.
	now = t0.Add(time.Millisecond)
	p.update(50, 1000)
	for done := 60; done <= 1000; done += 10 {
		now = t0.Add(time.Duration(float64(done-50)/50*float64(time.Second)) + time.Millisecond)
		p.update(done, 1000)
		p.update(done-5, 1000) // a late report from another goroutine never moves the count back
	}
	p.finish()
	lines := strings.Split(strings.TrimSuffix(buf.String(), "\n"), "\n")
	if len(lines) != 10 {
		t.Fatalf("%d lines, want 10 (one per 10%%):\n%s", len(lines), buf.String())
	}
	for i, l := range lines {
		m := progressLine.FindStringSubmatch(l)
		if m == nil {
			t.Fatalf("line %d %q is not in the progress layout", i+1, l)
		}
		if pct, _ := strconv.Atoi(m[3]); pct != 10*(i+1) {
			t.Errorf("line %d at %d%%, want %d%%", i+1, pct, 10*(i+1))
		}
		if m[5] == "" {
			// 10% (100 fits) comes at 1 s: too early for a rate.
			if i > 0 {
				t.Errorf("line %d %q has no rate", i+1, l)
			}
			continue
		}
		rate, err := strconv.ParseFloat(strings.ReplaceAll(m[5], ",", ""), 64)
		if err != nil {
			t.Fatal(err)
		}
		// Mean rate since the start: done / elapsed, elapsed = (done−50)/50 s.
		done := float64(100 * (i + 1))
		want := done / ((done - 50) / 50)
		if rate < want*0.95 || rate > want*1.05 {
			t.Errorf("line %d %q: rate %v, want about %.1f", i+1, l, rate, want)
		}
	}
	if !strings.Contains(lines[0], "rate not measured yet") {
		t.Errorf("first line %q shows a rate at 1 s", lines[0])
	}
	if !strings.Contains(lines[9], "1,000 of 1,000 fits (100%)") || !strings.Contains(lines[9], "done in 19 s") {
		t.Errorf("last line %q, want 1,000 of 1,000 and done in 19 s", lines[9])
	}
	if !strings.Contains(lines[1], "about 12 s left") { // 200 fits at 3 s: 66.7/s, 800 left: 12 s
		t.Errorf("second line %q, want about 12 s left", lines[1])
	}
}

// TestProgressRun: `discrimen run` with a non-terminal stderr writes only
// lines of our layout, at most one per 10%, and no absurd rate (the small
// study runs on two cores at well under 100,000 fits/s).
func TestProgressRun(t *testing.T) {
	dir := t.TempDir()
	study := filepath.Join(dir, "small.json")
	if err := os.WriteFile(study, []byte(smallRunStudy), 0o644); err != nil {
		t.Fatal(err)
	}
	var stdout, stderr bytes.Buffer
	if code := cmdRun([]string{study, "--out", filepath.Join(dir, "out"), "--workers", "2"}, &stdout, &stderr); code != 0 {
		t.Fatalf("run exited %d: %s", code, stderr.String())
	}
	var n int
	for _, l := range strings.Split(strings.TrimSuffix(stderr.String(), "\n"), "\n") {
		if strings.HasPrefix(l, "discrimen: building prediction grids") {
			continue
		}
		m := progressLine.FindStringSubmatch(l)
		if m == nil {
			t.Fatalf("stderr line %q is not in the progress layout", l)
		}
		n++
		if m[5] != "" {
			if r, _ := strconv.ParseFloat(strings.ReplaceAll(m[5], ",", ""), 64); r > 1e5 {
				t.Errorf("rate %v fits/s in %q", r, l)
			}
		}
	}
	if n < 1 || n > 10 {
		t.Fatalf("%d progress lines, want 1..10:\n%s", n, stderr.String())
	}
	if strings.Contains(stderr.String(), "\r") {
		t.Errorf("carriage return on a non-terminal stderr")
	}
	for _, name := range []string{"report.json", "report.html", "fits.csv", "fits.json", "params.csv", "params.json", "measurement.csv", "measurement.json"} {
		if st, err := os.Stat(filepath.Join(dir, "out", name)); err != nil || st.Size() == 0 {
			t.Errorf("%s: %v", name, err)
		}
	}
}

// smallRunStudy is an invented study of 2 hypotheses, 2 participants.
const smallRunStudy = `{
  "name": "progress (invented)", "seed": 3,
  "designs": [{"name": "d", "cti_ms": [300, 600], "trials_per_cti": 10, "participants": 5, "measures": ["rt", "accuracy"]}],
  "hypotheses": [
    {"name": "flat", "family": "constant", "params": {"level": {"min": 0.3, "max": 1.5}}},
    {"name": "ramp", "family": "linear", "params": {"slope": {"min": 0.5, "max": 3}}}
  ],
  "replication": {"group_sizes": [2], "replicates": 5}
}`

func TestProgressTerminal(t *testing.T) {
	var buf bytes.Buffer
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	now := t0
	p := newProgress(&buf, true, func() time.Time { return now })
	p.update(0, 7200)
	now = t0.Add(100 * time.Millisecond)
	p.update(10, 7200) // within the redraw interval: not drawn
	now = t0.Add(3 * time.Second)
	p.update(900, 7200)
	p.finish()
	want := "\rdiscrimen: 0 of 7,200 fits (0%), rate not measured yet" +
		"\rdiscrimen: 900 of 7,200 fits (12%), 300 fits/s, about 21 s left\n"
	if buf.String() != want {
		t.Fatalf("terminal output %q, want %q", buf.String(), want)
	}
}

// TestProgressFastRun: a study that finishes before a rate can be measured
// ends on the time it took, not on "rate not measured yet".
func TestProgressFastRun(t *testing.T) {
	var buf bytes.Buffer
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	now := t0
	p := newProgress(&buf, false, func() time.Time { return now })
	p.update(0, 20)
	for done := 2; done <= 20; done += 2 {
		now = t0.Add(time.Duration(done) * 50 * time.Millisecond)
		p.update(done, 20)
	}
	p.finish()
	lines := strings.Split(strings.TrimSuffix(buf.String(), "\n"), "\n")
	if len(lines) != 10 {
		t.Fatalf("%d lines, want 10:\n%s", len(lines), buf.String())
	}
	if !strings.Contains(lines[0], "rate not measured yet") {
		t.Errorf("first line %q, want no rate", lines[0])
	}
	if lines[9] != "discrimen: 20 of 20 fits (100%), done in 1 s" {
		t.Errorf("last line %q, want it to end on the time taken", lines[9])
	}
}
