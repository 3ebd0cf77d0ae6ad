package models

import (
	"fmt"
	"os"
	"testing"
)

func TestZZDump(t *testing.T) {
	out := os.Getenv("HG_DUMP")
	if out == "" {
		t.Skip()
	}
	f, _ := os.Create(out)
	defer f.Close()
	for _, tc := range oracleCases() {
		d := tc.design()
		l, err := NewListener(&d)
		if err != nil {
			t.Fatal(err)
		}
		precs := tc.precs
		if precs == nil {
			precs = defaultPrecisions(&d)
		}
		precs = append(precs, Saturating{Low: 0.1, High: 2, Tau: 0.17}, Saturating{Low: 0.1, High: 2, Tau: 0.18})
		ws := l.NewWorkspace()
		for _, p := range precs {
			pr := l.NewPrediction()
			l.Predict(p, pr, ws)
			for _, cl := range []ClassPrediction{pr.Valid, pr.Invalid} {
				for c := range cl.RTms {
					fmt.Fprintf(f, "%s %x %x %x %v\n", tc.name, cl.RTms[c], cl.Accuracy[c], cl.Misdirected[c], cl.Censored[c] == 1)
				}
			}
			for _, n := range pr.Neural {
				for _, v := range n {
					fmt.Fprintf(f, "%x ", v)
				}
				fmt.Fprintln(f)
			}
		}
	}
}
