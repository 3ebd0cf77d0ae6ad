package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"os"

	"discrimen/models"
)

// cmdValidate implements `discrimen validate STUDY.json`: it prints
// "ok: NAME (D designs, H hypotheses, F fits)" and returns 0, or prints
// every problem as "PATH: PROBLEM", one per line, and returns 1. Warnings
// (values allowed but likely a slip) are printed as "warning: PATH:
// PROBLEM" in either case and do not change the exit code. Usage errors
// and unreadable files return 2. D counts designs with their vary blocks
// expanded, since each variant is run as a design.
func cmdValidate(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("validate", flag.ContinueOnError)
	fs.SetOutput(stderr)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen validate STUDY.json")
		fmt.Fprintln(stderr, "Checks a study file and prints every problem with its field path.")
	}
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if fs.NArg() != 1 {
		fs.Usage()
		return 2
	}
	path := fs.Arg(0)
	data, err := os.ReadFile(path)
	if err != nil {
		fmt.Fprintf(stderr, "discrimen validate: %v\n", err)
		return 2
	}
	s, warnings, err := models.CheckStudy(data)
	if err != nil {
		var ve *models.ValidationError
		if !errors.As(err, &ve) {
			fmt.Fprintf(stderr, "discrimen validate: %s: %v\n", path, err)
			return 1
		}
		for _, p := range ve.Problems {
			fmt.Fprintln(stdout, p.String())
		}
		printWarnings(stdout, warnings)
		noun := "problems"
		if len(ve.Problems) == 1 {
			noun = "problem"
		}
		fmt.Fprintf(stderr, "discrimen validate: %s: %d %s\n", path, len(ve.Problems), noun)
		return 1
	}
	designs, err := s.ExpandedDesigns()
	if err != nil {
		// LoadStudy has validated the vary blocks, so this is a defect.
		panic("discrimen: validated study does not expand: " + err.Error())
	}
	printWarnings(stdout, warnings)
	note := ""
	switch n := len(warnings); {
	case n == 1:
		note = ", 1 warning"
	case n > 1:
		note = fmt.Sprintf(", %d warnings", n)
	}
	fmt.Fprintf(stdout, "ok: %s (%d designs, %d hypotheses, %d fits%s)\n", s.Name, len(designs), len(s.Hypotheses), s.TotalFits(), note)
	return 0
}
