package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"path/filepath"
	"syscall"

	"discrimen/pages"
	"discrimen/recovery"
)

func init() { extraCommands["run"] = cmdRun }

// cmdRun runs a study in this process and writes report.json, report.html
// and the tables with their sidecars (fits, params, measurement: .csv and
// .json). The progress line (progress.go) goes to stderr.
func cmdRun(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("run", flag.ContinueOnError)
	fs.SetOutput(stderr)
	out := fs.String("out", "", "output `DIR` for report.json, report.html and the tables (required)")
	workers := fs.Int("workers", 0, "goroutines to use (0 = all cores)")
	quiet := fs.Bool("quiet", false, "no progress line")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen run [STUDY.json] --out DIR   (default study: the embedded demo) [--workers N] [--quiet]")
		fs.PrintDefaults()
	}
	path, ok := parseStudyArgs(fs, args)
	if !ok {
		return 2
	}
	if *out == "" {
		fs.Usage()
		return 2
	}
	study, code := loadStudyFile(path, stderr)
	if study == nil {
		return code
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	var prog *progress
	opt := recovery.Options{Workers: *workers}
	if !*quiet {
		prog = newProgress(stderr, isTerminal(stderr), nil)
		opt.Progress = prog.update
		fmt.Fprintf(stderr, "discrimen: building prediction grids for %s ...\n", study.Name)
	}
	rep, err := recovery.Run(ctx, study, opt)
	if prog != nil {
		prog.finish()
	}
	if err != nil {
		if errors.Is(err, recovery.ErrCanceled) {
			fmt.Fprintln(stderr, "discrimen run: canceled; nothing written")
			return 130
		}
		fmt.Fprintln(stderr, "discrimen run:", err)
		return 1
	}
	if err := writeReport(*out, rep); err != nil {
		fmt.Fprintln(stderr, "discrimen run:", err)
		return 1
	}
	t := rep.Timing
	fmt.Fprintf(stdout, "%s: %d fits in %.1f s (%.0f fits/s, grids %.1f s) → %s\n", study.Name, t.Fits, t.TotalSeconds, t.FitsPerSecond, t.GridSeconds, *out)
	for _, d := range rep.Designs {
		for _, v := range d.Verdict {
			fmt.Fprintf(stdout, "  [%s] %s\n", d.Name, v)
		}
	}
	if rep.Verdict != "" {
		fmt.Fprintln(stdout, " ", rep.Verdict)
	}
	return 0
}

// writeReport writes report.json, report.html, the three tables and their
// sidecars, each through a temporary file and a rename so an interrupted
// run never leaves a half file.
func writeReport(dir string, rep *recovery.Report) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
	js, err := rep.JSON()
	if err != nil {
		return err
	}
	html, err := pages.Report(rep)
	if err != nil {
		return err
	}
	tables, err := rep.TableFiles()
	if err != nil {
		return err
	}
	files := append([]recovery.File{{Name: "report.json", Data: js}, {Name: "report.html", Data: html}}, tables...)
	for _, f := range files {
		tmp := filepath.Join(dir, "."+f.Name+".tmp")
		if err := os.WriteFile(tmp, f.Data, 0o644); err != nil {
			return err
		}
		if err := os.Rename(tmp, filepath.Join(dir, f.Name)); err != nil {
			return err
		}
	}
	return nil
}
