package main

import (
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"math"
	"os"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"

	"discrimen"
	"discrimen/models"
	"discrimen/pages"
)

// setFlags collects repeated --set HYPOTHESIS.PARAM=VALUE flags.
type setFlags map[string]map[string]float64

func (s setFlags) String() string { return "" }

func (s setFlags) Set(v string) error {
	lhs, rhs, ok := strings.Cut(v, "=")
	hyp, param, ok2 := strings.Cut(lhs, ".")
	if !ok || !ok2 || hyp == "" || param == "" {
		return fmt.Errorf("want HYPOTHESIS.PARAM=VALUE, got %q", v)
	}
	x, err := strconv.ParseFloat(rhs, 64)
	// ParseFloat accepts "NaN" and "Inf"; no parameter can take them.
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return fmt.Errorf("value of %s must be a finite number, got %q", lhs, rhs)
	}
	if s[hyp] == nil {
		s[hyp] = map[string]float64{}
	}
	s[hyp][param] = x
	return nil
}

func cmdPredict(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("predict", flag.ContinueOnError)
	fs.SetOutput(stderr)
	design := fs.String("design", "", "design `NAME` (default: the first)")
	format := fs.String("format", "table", "output format: table or json")
	htmlOut := fs.String("html", "", "also write the predictions as a self-contained page with charts to `FILE`")
	set := setFlags{}
	fs.Var(set, "set", "override a parameter, `HYPOTHESIS.PARAM=VALUE` (repeatable)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: discrimen predict [STUDY.json] (default: the embedded demo study) [--design NAME] [--set H.P=V ...] [--format table|json] [--html FILE]")
		fs.PrintDefaults()
	}
	path, ok := parseStudyArgs(fs, args)
	if !ok {
		return 2
	}
	if *format != "table" && *format != "json" {
		fmt.Fprintf(stderr, "discrimen predict: --format must be table or json, got %q\n", *format)
		return 2
	}
	study, code := loadStudyFile(path, stderr)
	if study == nil {
		return code
	}
	if problems := setProblems(study, set); len(problems) > 0 {
		fmt.Fprintln(stderr, "discrimen predict: --set makes the study invalid:")
		for _, p := range problems {
			fmt.Fprintln(stderr, "  "+p)
		}
		return 2
	}
	designs, err := study.ExpandedDesigns()
	if err != nil {
		fmt.Fprintln(stderr, "discrimen predict:", err)
		return 1
	}
	d := &designs[0]
	if *design != "" {
		d = nil
		var names []string
		for i := range designs {
			names = append(names, designs[i].Name)
			if designs[i].Name == *design {
				d = &designs[i]
			}
		}
		if d == nil {
			fmt.Fprintf(stderr, "discrimen predict: --design %q not in the study; designs: %s\n", *design, strings.Join(names, ", "))
			return 2
		}
	}
	preds, err := models.PredictDesign(study, d, set)
	if err != nil {
		fmt.Fprintln(stderr, "discrimen predict:", err)
		return 1
	}
	if *htmlOut != "" {
		page, err := pages.Predictions(study.Name, d, preds)
		if err != nil {
			fmt.Fprintln(stderr, "discrimen predict:", err)
			return 1
		}
		if err := os.WriteFile(*htmlOut, page, 0o644); err != nil {
			fmt.Fprintln(stderr, "discrimen predict: --html:", err)
			return 1
		}
	}
	if *format == "json" {
		out := struct {
			Design     string                        `json:"design"`
			Hypotheses []models.HypothesisPrediction `json:"hypotheses"`
		}{d.Name, preds}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		if err := enc.Encode(out); err != nil {
			fmt.Fprintln(stderr, "discrimen predict:", err)
			return 1
		}
		return 0
	}
	if err := writePredictTable(stdout, d, preds); err != nil {
		fmt.Fprintln(stderr, "discrimen predict: writing the table:", err)
		return 1
	}
	return 0
}

// setProblems checks the --set overrides as if they were written into the
// study file as fixed values: the same rules (the family's parameters, their
// signs, the gain bounds) and the same messages as discrimen validate.
func setProblems(s *models.Study, set setFlags) []string {
	if len(set) == 0 {
		return nil
	}
	names := make([]string, len(s.Hypotheses))
	index := map[string]int{}
	for i, h := range s.Hypotheses {
		names[i] = h.Name
		index[h.Name] = i
	}
	var out []string
	trial := *s
	trial.Hypotheses = append([]models.Hypothesis(nil), s.Hypotheses...)
	hyps := make([]string, 0, len(set))
	for h := range set {
		hyps = append(hyps, h)
	}
	sort.Strings(hyps)
	touched := map[int]bool{}
	for _, h := range hyps {
		i, ok := index[h]
		if !ok {
			out = append(out, fmt.Sprintf("--set %s.*: the study has no hypothesis %q; hypotheses: %s", h, h, strings.Join(names, ", ")))
			continue
		}
		touched[i] = true
		params := make(map[string]models.Param, len(trial.Hypotheses[i].Params)+len(set[h]))
		for k, v := range trial.Hypotheses[i].Params {
			params[k] = v
		}
		keys := make([]string, 0, len(set[h]))
		for k := range set[h] {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			v := set[h][k]
			// A free parameter's range is the fit's: a value outside it is
			// one no fit could reach.
			if p, ok := params[k]; ok && p.Free() && p.Min != nil && p.Max != nil && (v < *p.Min || v > *p.Max) {
				out = append(out, fmt.Sprintf("--set %s.%s=%s: %s must be within its range [%s, %s] in the study file (hypotheses[%d].params.%s)",
					h, k, strconv.FormatFloat(v, 'g', -1, 64), k, strconv.FormatFloat(*p.Min, 'g', -1, 64), strconv.FormatFloat(*p.Max, 'g', -1, 64), i, k))
			}
			params[k] = models.Param{Value: &v}
		}
		trial.Hypotheses[i].Params = params
	}
	for _, p := range trial.Validate() {
		// Only the hypotheses --set changed: the file itself passed.
		for i := range touched {
			if prefix := fmt.Sprintf("hypotheses[%d]", i); p.Path == prefix || strings.HasPrefix(p.Path, prefix+".") {
				out = append(out, fmt.Sprintf("--set %s: %s", s.Hypotheses[i].Name, p))
				break
			}
		}
	}
	return out
}

// parseStudyArgs parses a study command's flags, which may come before or
// after the study path; the path is "" when none is given (the embedded
// demo). ok is false when the flags do not parse.
func parseStudyArgs(fs *flag.FlagSet, args []string) (path string, ok bool) {
	path, rest := splitPath(args)
	if err := fs.Parse(rest); err != nil {
		return "", false
	}
	if path == "" && fs.NArg() > 0 {
		path = fs.Arg(0)
	}
	return path, true
}

// splitPath takes the first non-flag argument as the study path so that
// flags may come before or after it.
func splitPath(args []string) (string, []string) {
	if len(args) > 0 && !strings.HasPrefix(args[0], "-") {
		return args[0], args[1:]
	}
	return "", args
}

// loadStudyFile reads and validates a study; on failure it prints every
// problem and returns nil with the exit code.
func loadStudyFile(path string, stderr io.Writer) (*models.Study, int) {
	data := discrimen.DemoStudy
	if path != "" {
		var err error
		data, err = os.ReadFile(path)
		if err != nil {
			fmt.Fprintln(stderr, "discrimen:", err)
			return nil, 2
		}
	} else {
		path = "the embedded demo study"
	}
	s, warnings, err := models.CheckStudy(data)
	printWarnings(stderr, warnings)
	if err != nil {
		fmt.Fprintf(stderr, "discrimen: %s is not a valid study:\n%v\n", path, err)
		return nil, 1
	}
	return s, 0
}

// printWarnings writes each warning as "warning: PATH: PROBLEM".
func printWarnings(w io.Writer, warnings []models.Problem) {
	for _, p := range warnings {
		fmt.Fprintln(w, "warning: "+p.String())
	}
}

// writePredictTable writes the table; its error is the first failed write
// (the tabwriters' Flush reports it).
func writePredictTable(w io.Writer, d *models.Design, preds []models.HypothesisPrediction) error {
	fmt.Fprintf(w, "design %s: %d streams, %d items, validity %.2f, measures %s\n\n",
		d.Name, d.Streams, d.Items, d.Validity, strings.Join(d.Measures, ","))
	// Names and families read left-aligned: pad them to one width so the
	// right-aligning tabwriter (numbers) leaves them flush left.
	nw, fw := len("hypothesis"), len("family")
	for _, p := range preds {
		nw, fw = max(nw, len(p.Name)), max(fw, len(p.Family))
	}
	left := func(s string, n int) string { return s + strings.Repeat(" ", n-len(s)) }
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, left("hypothesis", nw)+"\t"+left("family", fw)+"\tCTI (ms)\tvalid RT (ms)\tvalid acc\tinvalid RT (ms)\tinvalid acc\tmisdirected\tcensored\t")
	for _, p := range preds {
		for c, cti := range p.CTIms {
			cens := p.Censored.Label(c, "-")
			name, fam := p.Name, p.Family
			if c > 0 {
				name, fam = "", ""
			}
			fmt.Fprintf(tw, "%s\t%s\t%d\t%.1f\t%.3f\t%.1f\t%.3f\t%.3f\t%s\t\n", left(name, nw), left(fam, fw), cti,
				p.Valid.RTms[c], p.Valid.Accuracy[c], p.Invalid.RTms[c], p.Invalid.Accuracy[c], p.Invalid.Misdirected[c], cens)
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(w)
	fmt.Fprintf(w, "parameters used (free ones at the median of their generating distribution unless --set):\n")
	for _, p := range preds {
		fmt.Fprintf(w, "  %-20s %s\n", p.Name, formatParams(p.Params))
	}
	fmt.Fprintf(w, "\nneural signal (expected precision, baseline-corrected) in %d ms bins from cue onset, longest CTI:\n", preds[0].Neural.BinMs)
	tw = tabwriter.NewWriter(w, 0, 0, 1, ' ', tabwriter.AlignRight)
	last := len(preds[0].CTIms) - 1
	fmt.Fprint(tw, left("hypothesis", nw)+"\t")
	for b := range preds[0].Neural.ByCTI[last] {
		fmt.Fprintf(tw, "%d\t", (b+1)*preds[0].Neural.BinMs)
	}
	fmt.Fprintln(tw)
	for _, p := range preds {
		fmt.Fprintf(tw, "%s\t", left(p.Name, nw))
		for _, v := range p.Neural.ByCTI[last] {
			fmt.Fprintf(tw, "%.3f\t", v)
		}
		fmt.Fprintln(tw)
	}
	return tw.Flush()
}

func formatParams(m map[string]float64) string {
	keys := make([]string, 0, len(m))
	for k := range m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = fmt.Sprintf("%s=%.4g", k, m[k])
	}
	return strings.Join(parts, " ")
}
