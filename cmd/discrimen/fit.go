package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"

	"discrimen/pages"
	"discrimen/recovery"
)

func init() { extraCommands["fit"] = cmdFit }

// cmdFit fits collected data with the study's hypotheses and writes
// fit.json, fit.html and the fit tables with their sidecars. Nothing is
// written unless every file parses and the fit finishes.
func cmdFit(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("fit", flag.ContinueOnError)
	fs.SetOutput(stderr)
	design := fs.String("design", "", "the design `NAME` the data were collected under (required)")
	trials := fs.String("trials", "", "the trials `FILE` (.csv or .tsv; required)")
	eeg := fs.String("eeg", "", "the eeg `FILE` (.csv or .tsv), when the design measures eeg")
	columns := fs.String("columns", "", "renamed columns, `FORMAT=FILE,...` (for example participant=subj,rt_ms=RT)")
	report := fs.String("recovery", "", "the study's recovery `report.json`, for P(true | winner) beside each verdict")
	out := fs.String("out", "", "output `DIR` (required)")
	workers := fs.Int("workers", 0, "goroutines to use (0 = all cores)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen fit STUDY.json --design NAME --trials FILE [--eeg FILE] [--columns A=B,...] [--recovery report.json] --out DIR")
		fs.PrintDefaults()
	}
	path, ok := parseStudyArgs(fs, args)
	if !ok {
		return 2
	}
	if path == "" || *design == "" || *trials == "" || *out == "" {
		fs.Usage()
		return 2
	}
	study, code := loadStudyFile(path, stderr)
	if study == nil {
		return code
	}
	fail := func(err error) int {
		fmt.Fprintln(stderr, "discrimen fit:", err)
		return 1
	}
	cols, err := recovery.ParseColumns(*columns)
	if err != nil {
		return fail(err)
	}
	d, err := recovery.StudyDesign(study, *design)
	if err != nil {
		return fail(err)
	}
	read := func(name string) (*recovery.DataFile, error) {
		b, err := os.ReadFile(name)
		if err != nil {
			return nil, err
		}
		return &recovery.DataFile{Name: name, Data: b}, nil
	}
	tf, err := read(*trials)
	if err != nil {
		return fail(err)
	}
	var ef *recovery.DataFile
	if *eeg != "" {
		if ef, err = read(*eeg); err != nil {
			return fail(err)
		}
	}
	data, err := recovery.ParseCollected(d, *tf, ef, cols)
	if err != nil {
		fmt.Fprintf(stderr, "discrimen fit: the data do not parse; nothing was written:\n%v\n", err)
		var es recovery.DataErrors
		if errors.As(err, &es) && len(es) >= recovery.MaxDataErrors {
			fmt.Fprintf(stderr, "discrimen fit: the first %d problems are listed; the parse stopped there\n", len(es))
		}
		return 1
	}
	opt := recovery.FitOptions{Workers: *workers}
	if *report != "" {
		b, err := os.ReadFile(*report)
		if err != nil {
			return fail(err)
		}
		if opt.Recovery, err = recovery.ReadRecoveryReport(b, study, *design); err != nil {
			return fail(fmt.Errorf("%s: %w", *report, err))
		}
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	fmt.Fprintf(stderr, "discrimen: building prediction grids for %s and fitting %d participants × %d hypotheses ...\n", *design, len(data.Participants), len(study.Hypotheses))
	res, err := recovery.FitCollected(ctx, study, data, opt)
	if err != nil {
		if errors.Is(err, recovery.ErrCanceled) {
			fmt.Fprintln(stderr, "discrimen fit: canceled; nothing written")
			return 130
		}
		return fail(err)
	}
	js, err := res.JSON()
	if err != nil {
		return fail(err)
	}
	html, err := pages.Fit(res)
	if err != nil {
		return fail(err)
	}
	tables, err := res.TableFiles()
	if err != nil {
		return fail(err)
	}
	files := append([]recovery.File{{Name: "fit.json", Data: js}, {Name: "fit.html", Data: html}}, tables...)
	if err := writeFiles(*out, files); err != nil {
		return fail(err)
	}
	fmt.Fprintf(stdout, "%s, design %s: %d participants × %d hypotheses in %.1f s (grids %.1f s) → %s\n", study.Name, *design, len(res.Participants), len(res.Hypotheses), res.Timing.TotalSeconds, res.Timing.GridSeconds, *out)
	for _, v := range res.Group.Verdicts {
		fmt.Fprintln(stdout, " ", v)
	}
	return 0
}
