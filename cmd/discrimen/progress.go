package main

import (
	"fmt"
	"io"
	"os"
	"strings"
	"sync"
	"time"
)

// progress is `discrimen run`'s progress line on stderr:
//
//	discrimen: 1,234 of 7,200 fits (17%), 310 fits/s, about 19 s left
//
// The rate is the mean since fitting began (the first update, at 0 fits)
// and is shown only once it can be measured: after rateAfter and at least
// rateShare of the fits, so a first burst of finished fits cannot claim an
// absurd rate; until then the line says "rate not measured yet". On a
// terminal the line is redrawn in place at most every redrawEvery; on
// anything else (a file, a pipe, a CI log) one plain line is written at
// each 10% of the fits (10%, 20%, ..., 100%).
type progress struct {
	w     io.Writer
	tty   bool
	now   func() time.Time
	mu    sync.Mutex
	start time.Time
	done  int
	total int
	// decile is the last 10% step written (non-terminal output).
	decile int
	// drawn is when the terminal line was last drawn; width its length.
	drawn time.Time
	width int
}

const (
	rateAfter   = 2 * time.Second
	rateShare   = 0.01
	redrawEvery = 200 * time.Millisecond
)

// newProgress writes to w; tty says whether w is a terminal.
func newProgress(w io.Writer, tty bool, now func() time.Time) *progress {
	if now == nil {
		now = time.Now
	}
	return &progress{w: w, tty: tty, now: now}
}

// isTerminal reports whether w is a character device (a terminal).
func isTerminal(w io.Writer) bool {
	f, ok := w.(*os.File)
	if !ok {
		return false
	}
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

// update records fits done of total; safe for concurrent use. Updates
// that arrive out of order never move the count back.
func (p *progress) update(done, total int) {
	p.mu.Lock()
	defer p.mu.Unlock()
	now := p.now()
	if p.start.IsZero() {
		p.start = now
	}
	p.total = total
	if done > p.done {
		p.done = done
	}
	if p.tty {
		if p.done < p.total && now.Sub(p.drawn) < redrawEvery {
			return
		}
		p.drawn = now
		line := p.line(now)
		pad := ""
		if n := p.width - len([]rune(line)); n > 0 {
			pad = strings.Repeat(" ", n)
		}
		p.width = len([]rune(line))
		fmt.Fprint(p.w, "\r"+line+pad)
		return
	}
	if p.total <= 0 {
		return
	}
	d := 10 * p.done / p.total
	if d > p.decile {
		p.decile = d
		fmt.Fprintln(p.w, p.line(now))
	}
}

// finish ends the terminal line; plain output needs nothing.
func (p *progress) finish() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.tty && p.width > 0 {
		fmt.Fprintln(p.w)
	}
}

// line is the progress text at time now.
func (p *progress) line(now time.Time) string {
	pct := 0
	if p.total > 0 {
		pct = 100 * p.done / p.total
	}
	s := fmt.Sprintf("discrimen: %s of %s fits (%d%%)", thousands(p.done), thousands(p.total), pct)
	elapsed := now.Sub(p.start)
	if elapsed < rateAfter || float64(p.done) < rateShare*float64(p.total) || p.done == 0 {
		if p.done > 0 && p.done >= p.total {
			// Finished before a rate could be measured: the time says it.
			return s + fmt.Sprintf(", done in %s", durationText(elapsed))
		}
		return s + ", rate not measured yet"
	}
	rate := float64(p.done) / elapsed.Seconds()
	s += fmt.Sprintf(", %s fits/s", rateText(rate))
	if p.done >= p.total {
		return s + fmt.Sprintf(", done in %s", durationText(elapsed))
	}
	left := time.Duration(float64(p.total-p.done) / rate * float64(time.Second))
	return s + fmt.Sprintf(", about %s left", durationText(left))
}

// thousands writes n with commas between groups of three digits.
func thousands(n int) string {
	s := fmt.Sprint(n)
	if n < 0 {
		return "-" + thousands(-n)
	}
	var b strings.Builder
	for i, c := range s {
		if i > 0 && (len(s)-i)%3 == 0 {
			b.WriteByte(',')
		}
		b.WriteRune(c)
	}
	return b.String()
}

// rateText: one decimal below 10 fits/s, whole numbers above.
func rateText(r float64) string {
	if r < 10 {
		return fmt.Sprintf("%.1f", r)
	}
	return thousands(int(r + 0.5))
}

// durationText: "45 s", "3 min 20 s", "2 h 05 min".
func durationText(d time.Duration) string {
	s := int(d.Seconds() + 0.5)
	switch {
	case s < 60:
		return fmt.Sprintf("%d s", s)
	case s < 3600:
		return fmt.Sprintf("%d min %02d s", s/60, s%60)
	default:
		return fmt.Sprintf("%d h %02d min", s/3600, (s%3600)/60)
	}
}
