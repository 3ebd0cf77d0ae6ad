package recovery

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"math"
	"strconv"
	"strings"
	"testing"
)

// parsedTable is one rendered CSV and its sidecar, read back.
type parsedTable struct {
	name    string
	header  []string
	rows    [][]string
	sidecar map[string]struct {
		Description string
		Units       string
		Levels      map[string]string
	}
	order []string // sidecar keys in file order
}

func parseFiles(t *testing.T, files []File) map[string]*parsedTable {
	t.Helper()
	out := map[string]*parsedTable{}
	for _, f := range files {
		stem, ext, _ := strings.Cut(f.Name, ".")
		p := out[stem]
		if p == nil {
			p = &parsedTable{name: stem}
			out[stem] = p
		}
		switch ext {
		case "csv":
			recs, err := csv.NewReader(bytes.NewReader(f.Data)).ReadAll()
			if err != nil {
				t.Fatalf("%s: %v", f.Name, err)
			}
			p.header, p.rows = recs[0], recs[1:]
		case "json":
			if err := json.Unmarshal(f.Data, &p.sidecar); err != nil {
				t.Fatalf("%s: %v", f.Name, err)
			}
			dec := json.NewDecoder(bytes.NewReader(f.Data))
			dec.Token() // {
			for dec.More() {
				k, _ := dec.Token()
				p.order = append(p.order, k.(string))
				var skip json.RawMessage
				if err := dec.Decode(&skip); err != nil {
					t.Fatal(err)
				}
			}
		default:
			t.Fatalf("unexpected file %s", f.Name)
		}
	}
	return out
}

func (p *parsedTable) col(t *testing.T, name string) int {
	t.Helper()
	for i, h := range p.header {
		if h == name {
			return i
		}
	}
	t.Fatalf("%s.csv has no column %s", p.name, name)
	return -1
}

func smallTables(t *testing.T, study string) (*Report, map[string]*parsedTable) {
	t.Helper()
	r, err := Run(context.Background(), mustStudy(t, study), Options{Workers: 2})
	if err != nil {
		t.Fatal(err)
	}
	files, err := r.TableFiles()
	if err != nil {
		t.Fatal(err)
	}
	var names []string
	for _, f := range files {
		names = append(names, f.Name)
	}
	if got := strings.Join(names, " "); got != "fits.csv fits.json params.csv params.json measurement.csv measurement.json" {
		t.Fatalf("table files %s", got)
	}
	return r, parseFiles(t, files)
}

// TestTables checks the three tables of the small study: every CSV column
// is in its sidecar and every sidecar entry is a column (in the same
// order); no cell is empty; categorical cells take declared levels; NA
// sits exactly where a value is missing; the win shares of each dataset
// sum to 1 under each criterion and are 1, 0 or 1/m; row counts match the
// study.
func TestTables(t *testing.T) {
	r, tabs := smallTables(t, smallStudy)
	for _, p := range tabs {
		if strings.Join(p.header, ",") != strings.Join(p.order, ",") {
			t.Errorf("%s: CSV columns %v, sidecar entries %v", p.name, p.header, p.order)
		}
		for name, c := range p.sidecar {
			if strings.TrimSpace(c.Description) == "" {
				t.Errorf("%s.json: %s has no Description", p.name, name)
			}
		}
		for i, row := range p.rows {
			if len(row) != len(p.header) {
				t.Fatalf("%s row %d: %d cells, want %d", p.name, i+1, len(row), len(p.header))
			}
			for j, c := range row {
				if c == "" {
					t.Errorf("%s row %d column %s is empty, want a value or NA", p.name, i+1, p.header[j])
				}
				if lv := p.sidecar[p.header[j]].Levels; lv != nil && c != NA {
					if _, ok := lv[c]; !ok {
						t.Errorf("%s row %d column %s = %q, not one of its levels", p.name, i+1, p.header[j], c)
					}
				}
			}
		}
	}
	// 3 generators × 6 participants × 3 candidates; params: flat 1, ramp
	// 1, switch 2 free parameters; measurement: 8 terms (rt, accuracy, eeg).
	fits, params, meas := tabs["fits"], tabs["params"], tabs["measurement"]
	if len(fits.rows) != 54 || len(params.rows) != 18*(1+1+2) || len(meas.rows) != 54*8 {
		t.Fatalf("rows: fits %d (want 54), params %d (want 72), measurement %d (want 432)", len(fits.rows), len(params.rows), len(meas.rows))
	}

	gen, cand, part := fits.col(t, "generator"), fits.col(t, "candidate"), fits.col(t, "participant")
	for _, crit := range []string{"win_bic", "win_aic", "win_aicc"} {
		c := fits.col(t, crit)
		sums := map[string]float64{}
		for _, row := range fits.rows {
			v, err := strconv.ParseFloat(row[c], 64)
			if err != nil {
				t.Fatalf("%s = %q: %v", crit, row[c], err)
			}
			ok := v == 0 || v == 1
			for m := 2; m <= 3; m++ {
				ok = ok || math.Abs(v-1/float64(m)) < 1e-9
			}
			if !ok {
				t.Errorf("%s = %v, want 1, 0 or 1/m", crit, v)
			}
			sums[row[gen]+"/"+row[part]] += v
		}
		if len(sums) != 18 {
			t.Fatalf("%s: %d datasets, want 18", crit, len(sums))
		}
		for ds, s := range sums {
			if math.Abs(s-1) > 1e-9 {
				t.Errorf("%s: dataset %s shares sum to %v, want 1", crit, ds, s)
			}
		}
	}
	// The BIC shares agree with the report's confusion counts.
	counts := r.Designs[0].Criteria[BICCriterion].Counts
	c := fits.col(t, "win_bic")
	got := map[[2]string]float64{}
	for _, row := range fits.rows {
		v, _ := strconv.ParseFloat(row[c], 64)
		got[[2]string{row[gen], row[cand]}] += v
	}
	for i, g := range r.Hypotheses {
		for j, k := range r.Hypotheses {
			if math.Abs(got[[2]string{g, k}]-float64(counts[i][j])) > 1e-9 {
				t.Errorf("BIC wins of %s's data by %s: %v in fits.csv, %v in the report", g, k, got[[2]string{g, k}], counts[i][j])
			}
		}
	}
	// NA exactly where the value is missing: truth_loglik and below_truth
	// for fits that are not self-fits, true values and intervals likewise.
	tl, bt := fits.col(t, "truth_loglik"), fits.col(t, "below_truth")
	for _, row := range fits.rows {
		self := row[gen] == row[cand]
		if self == (row[tl] == NA) || self == (row[bt] == NA) {
			t.Errorf("fits row %v: truth_loglik %q, below_truth %q for self-fit %v", row[:4], row[tl], row[bt], self)
		}
		if row[fits.col(t, "error")] != NA {
			t.Errorf("fits row %v: error %q on a fit of the small study, want NA", row[:4], row[fits.col(t, "error")])
		}
	}
	pg, pc := params.col(t, "generator"), params.col(t, "candidate")
	for _, name := range []string{"true_value", "low", "high", "open_low", "pieces", "se_reliable"} {
		k := params.col(t, name)
		for _, row := range params.rows {
			self := row[pg] == row[pc]
			if !self && row[k] != NA {
				t.Errorf("params %v: %s = %q for a fit that is not a self-fit, want NA", row[:5], name, row[k])
			}
			if self && row[k] == NA {
				t.Errorf("params %v: %s is NA for a self-fit", row[:5], name)
			}
		}
	}
	// Estimates, truths and interval ends are numbers inside the range;
	// the interval holds the estimate.
	est, tv, lo, hi := params.col(t, "estimate"), params.col(t, "true_value"), params.col(t, "low"), params.col(t, "high")
	rmin, rmax, pcs := params.col(t, "range_min"), params.col(t, "range_max"), params.col(t, "pieces")
	for _, row := range params.rows {
		f := func(k int) float64 {
			v, err := strconv.ParseFloat(row[k], 64)
			if err != nil {
				t.Fatalf("params %v: %s = %q: %v", row[:5], params.header[k], row[k], err)
			}
			return v
		}
		a, b, e := f(rmin), f(rmax), f(est)
		if !(a < b) || e < a || e > b {
			t.Errorf("params %v: estimate %v outside its range [%v, %v]", row[:5], e, a, b)
		}
		if row[pg] != row[pc] {
			continue
		}
		if v := f(tv); v < a || v > b {
			t.Errorf("params %v: true value %v outside [%v, %v]", row[:5], v, a, b)
		}
		if l, h := f(lo), f(hi); l > e || h < e || l < a || h > b {
			t.Errorf("params %v: interval [%v, %v] does not hold the estimate %v inside [%v, %v]", row[:5], l, h, e, a, b)
		}
		if n := f(pcs); n < 1 {
			t.Errorf("params %v: %v pieces", row[:5], n)
		}
	}
	// Measurement truth is the dataset's, the same for every candidate.
	mg, mp, mt, mtv := meas.col(t, "generator"), meas.col(t, "participant"), meas.col(t, "term"), meas.col(t, "true_value")
	truth := map[string]string{}
	for _, row := range meas.rows {
		key := row[mg] + "/" + row[mp] + "/" + row[mt]
		if prev, ok := truth[key]; ok && prev != row[mtv] {
			t.Errorf("measurement %s: true value %s and %s", key, prev, row[mtv])
		}
		truth[key] = row[mtv]
		if row[mtv] == NA || row[meas.col(t, "estimate")] == NA {
			t.Errorf("measurement %v: NA on a finite fit", row)
		}
	}
}

// TestTablesFormulaNames: a hypothesis named "=cmd" and a design named
// "-d" reach every CSV as text with a leading quote (OWASP, "CSV
// Injection"), the sidecar levels name the cells as written, and number
// cells (negative ln L among them) stay plain numbers.
func TestTablesFormulaNames(t *testing.T) {
	study := strings.NewReplacer(`"name": "flat"`, `"name": "=cmd"`, `"name": "d"`, `"name": "-d"`).Replace(smallStudy)
	if study == smallStudy {
		t.Fatal("the replacement did not apply")
	}
	_, tabs := smallTables(t, study)
	for _, p := range tabs {
		g, d := p.col(t, "generator"), p.col(t, "design")
		var cmd int
		for _, row := range p.rows {
			for j, c := range row {
				if c != "" && strings.ContainsRune("=+-@\t\r", rune(c[0])) {
					if _, err := strconv.ParseFloat(c, 64); err != nil {
						t.Errorf("%s column %s: cell %q starts with a formula character", p.name, p.header[j], c)
					}
				}
			}
			if row[d] != "'-d" {
				t.Errorf("%s: design cell %q, want '-d", p.name, row[d])
			}
			if row[g] == "'=cmd" {
				cmd++
			}
		}
		if cmd == 0 {
			t.Errorf("%s: no generator cell '=cmd", p.name)
		}
		if _, ok := p.sidecar["generator"].Levels["'=cmd"]; !ok {
			t.Errorf("%s.json: generator levels %v lack '=cmd", p.name, p.sidecar["generator"].Levels)
		}
	}
	ll := tabs["fits"].col(t, "loglik")
	for _, row := range tabs["fits"].rows {
		if v, err := strconv.ParseFloat(row[ll], 64); err != nil || v >= 0 {
			t.Fatalf("loglik cell %q, want a plain negative number", row[ll])
		}
	}
}

func TestSafeText(t *testing.T) {
	for in, want := range map[string]string{
		"=cmd": "'=cmd", "+1": "'+1", "-x": "'-x", "@SUM(A1)": "'@SUM(A1)", "\tx": "'\tx", "\rx": "'\rx",
		"ramp": "ramp", "a=b": "a=b", "": "", "'=": "'=", "NA": "'NA", "NAB": "NAB",
	} {
		if got := SafeText(in); got != want {
			t.Errorf("SafeText(%q) = %q, want %q", in, got, want)
		}
	}
}
