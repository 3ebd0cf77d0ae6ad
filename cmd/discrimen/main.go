// Command discrimen tells a researcher, before data collection, whether an
// experimental design can tell competing precision hypotheses apart.
//
// Subcommands:
//
//	discrimen validate STUDY.json          every problem in the file, with its field path
//	discrimen predict STUDY.json           the hypotheses' predictions, as a table or JSON
//	discrimen run STUDY.json --out DIR     run a study in this process and write the report
//	discrimen export STUDY.json ...        synthetic participants in the collected-data format
//	discrimen fit STUDY.json ...           fit collected data with the study's hypotheses
//	discrimen serve                        API and workers in one process
//	discrimen api | worker                 the two halves, against a real Redis
//	discrimen key add NAME --keys FILE     make an API key
package main

import (
	"fmt"
	"io"
	"os"
)

const usage = `usage: discrimen COMMAND [flags]

commands:
  validate STUDY.json            list every problem in a study file
  predict  [STUDY.json]          predicted RT, accuracy and neural signal per hypothesis (--html FILE for plots)
  run      [STUDY.json] --out DIR  run a study here and write report.json, report.html, fits/params/measurement .csv + .json
                                 (no STUDY.json: the embedded demo study)
  export   STUDY.json --design NAME --generator NAME --participants N --out DIR
                                 the synthetic participants run fits, as trials.csv (+ eeg.csv) and truth.csv
  fit      STUDY.json --design NAME --trials FILE [--eeg FILE] [--columns A=B,...] [--recovery report.json] --out DIR
                                 fit collected data with every hypothesis: fit.json, fit.html, fit_*.csv + .json
  serve                          HTTP API and workers in one process
  api                            HTTP API against a shared Redis
  worker                         queue worker against a shared Redis
  key add NAME --keys FILE       make an API key (printed once; only its hash is stored)

Run 'discrimen COMMAND -h' for a command's flags.
`

func main() {
	os.Exit(dispatch(os.Args[1:], os.Stdout, os.Stderr))
}

func dispatch(args []string, stdout, stderr io.Writer) int {
	if len(args) == 0 {
		fmt.Fprint(stderr, usage)
		return 2
	}
	cmd, rest := args[0], args[1:]
	switch cmd {
	case "validate":
		return cmdValidate(rest, stdout, stderr)
	case "predict":
		return cmdPredict(rest, stdout, stderr)
	case "-h", "--help", "help":
		fmt.Fprint(stdout, usage)
		return 0
	}
	if f, ok := extraCommands[cmd]; ok {
		return f(rest, stdout, stderr)
	}
	fmt.Fprintf(stderr, "discrimen: unknown command %q\n\n%s", cmd, usage)
	return 2
}

// extraCommands holds the commands registered by other files of this
// package (run, serve, api, worker, key).
var extraCommands = map[string]func([]string, io.Writer, io.Writer) int{}
