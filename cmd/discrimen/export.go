package main

import (
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"discrimen/recovery"
)

func init() { extraCommands["export"] = cmdExport }

// cmdExport writes the synthetic datasets of one generator's participants
// in the collected-data format (trials.csv, eeg.csv, truth.csv and their
// sidecars): the participants `run` fits, for rehearsing a pipeline.
func cmdExport(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("export", flag.ContinueOnError)
	fs.SetOutput(stderr)
	design := fs.String("design", "", "the design `NAME` (required)")
	generator := fs.String("generator", "", "the generating hypothesis `NAME` (required)")
	n := fs.Int("participants", 0, "participants 0..`N`-1 of the generator (required)")
	out := fs.String("out", "", "output `DIR` (required)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen export STUDY.json --design NAME --generator NAME --participants N --out DIR")
		fs.PrintDefaults()
	}
	path, ok := parseStudyArgs(fs, args)
	if !ok {
		return 2
	}
	if path == "" || *design == "" || *generator == "" || *n == 0 || *out == "" {
		fs.Usage()
		return 2
	}
	study, code := loadStudyFile(path, stderr)
	if study == nil {
		return code
	}
	files, err := recovery.Export(study, *design, *generator, *n)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen export:", err)
		return 1
	}
	if err := writeFiles(*out, files); err != nil {
		fmt.Fprintln(stderr, "discrimen export:", err)
		return 1
	}
	names := ""
	for i, f := range files {
		if i > 0 {
			names += ", "
		}
		names += f.Name
	}
	fmt.Fprintf(stdout, "%s: %d synthetic participants of %s under %s → %s (%s)\n", study.Name, *n, *generator, *design, *out, names)
	return 0
}

// writeFiles writes each file through a temporary file and a rename, so
// that an interrupted write never leaves a half file.
func writeFiles(dir string, files []recovery.File) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return err
	}
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
