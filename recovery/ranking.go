package recovery

import (
	"fmt"
	"math"
	"strconv"
)

// rankTolerance is the difference in normalised MI, worst-case diagonal or
// mean parameter r within which two designs tie on that measure and the
// next one decides (model.md §8).
const rankTolerance = 0.01

// rankDesigns orders the designs (model.md §8): by normalised mutual
// information under BIC; designs within 0.01 of each other by the worst-case
// diagonal of the BIC confusion matrix, then by mean parameter recovery r,
// then by fewer minutes of testing per participant, then by name. A NaN
// measure ranks below every number. It fills Ranking, Preferred (rank 1)
// and Verdict.
func rankDesigns(rep *Report) {
	rows := make([]DesignRank, len(rep.Designs))
	for i, d := range rep.Designs {
		rows[i] = designRank(d)
	}
	// Insertion sort: stable and, with a tolerance that need not be
	// transitive, still fully determined by the input order.
	for i := 1; i < len(rows); i++ {
		for j := i; j > 0 && rankBefore(rows[j], rows[j-1]); j-- {
			rows[j], rows[j-1] = rows[j-1], rows[j]
		}
	}
	for i := range rows {
		rows[i].Rank = i + 1
	}
	rep.Ranking = rows
	rep.Preferred, rep.Verdict = "", ""
	if len(rows) == 0 {
		return
	}
	rep.Preferred = rows[0].Design
	group := map[string]*GroupReport{}
	for _, d := range rep.Designs {
		group[d.Name] = d.Group
	}
	var groups []*GroupReport
	for _, r := range rows[:min(2, len(rows))] {
		groups = append(groups, group[r.Design])
	}
	rep.Verdict = rankingVerdict(rows, groups)
}

func designRank(d DesignReport) DesignRank {
	cr := d.Criteria[BICCriterion]
	worst := math.NaN()
	for i := range cr.Confusion {
		if i < len(cr.Confusion[i]) {
			v := float64(cr.Confusion[i][i])
			if !math.IsNaN(v) && (math.IsNaN(worst) || v < worst) {
				worst = v
			}
		}
	}
	var sum float64
	var n int
	for _, p := range d.ParamRecovery {
		if v := float64(p.R); !math.IsNaN(v) {
			sum += v
			n++
		}
	}
	r := math.NaN()
	if n > 0 {
		r = sum / float64(n)
	}
	perMin := math.NaN()
	if d.MinutesPerParticipant > 0 {
		perMin = float64(cr.NormalizedMI) / d.MinutesPerParticipant
	}
	return DesignRank{
		Design: d.Name, NormalizedMI: cr.NormalizedMI, WorstDiagonal: NullFloat(worst), ParameterR: NullFloat(r),
		TrialsPerParticipant: d.TrialsPerParticipant, MinutesPerParticipant: d.MinutesPerParticipant, NormalizedMIPerMinute: NullFloat(perMin),
	}
}

// better compares one measure, larger first: +1 when a is ahead by more
// than the tolerance, −1 when behind, 0 on a tie. NaN is behind a number.
func better(a, b NullFloat) int {
	x, y := float64(a), float64(b)
	switch {
	case math.IsNaN(x) && math.IsNaN(y):
		return 0
	case math.IsNaN(y):
		return 1
	case math.IsNaN(x):
		return -1
	case x > y+rankTolerance:
		return 1
	case y > x+rankTolerance:
		return -1
	}
	return 0
}

// rankKey is the first measure on which a and b differ: 0 normalised MI,
// 1 worst diagonal, 2 parameter r, 3 minutes, 4 name; with the sign of
// a's advantage.
func rankKey(a, b DesignRank) (key, sign int) {
	for k, c := range []int{better(a.NormalizedMI, b.NormalizedMI), better(a.WorstDiagonal, b.WorstDiagonal), better(a.ParameterR, b.ParameterR)} {
		if c != 0 {
			return k, c
		}
	}
	switch {
	case a.MinutesPerParticipant < b.MinutesPerParticipant:
		return 3, 1
	case a.MinutesPerParticipant > b.MinutesPerParticipant:
		return 3, -1
	case a.Design < b.Design:
		return 4, 1
	case a.Design > b.Design:
		return 4, -1
	}
	return 4, 0
}

func rankBefore(a, b DesignRank) bool { _, s := rankKey(a, b); return s > 0 }

// f2 formats a measure with two decimals, or "n/a" when it is missing.
func f2(x NullFloat) string {
	if v := float64(x); !math.IsNaN(v) && !math.IsInf(v, 0) {
		return strconv.FormatFloat(v, 'f', 2, 64)
	}
	return "n/a"
}

// rankingVerdict says which design to prefer and why, with the numbers of
// the preferred design and the runner-up. groups holds their group reports
// (entries may be nil).
func rankingVerdict(rows []DesignRank, groups []*GroupReport) string {
	a := rows[0]
	minutes := func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) }
	if len(rows) == 1 {
		return fmt.Sprintf("Only one design, %s: normalised MI %s, worst-case recovery %s, mean parameter r %s, at %s minutes (%d trials) per participant.",
			a.Design, f2(a.NormalizedMI), f2(a.WorstDiagonal), f2(a.ParameterR), minutes(a.MinutesPerParticipant), a.TrialsPerParticipant)
	}
	b := rows[1]
	key, _ := rankKey(a, b)
	var why string
	switch key {
	case 0:
		why = "it carries more information about which hypothesis generated the data"
	case 1:
		why = "normalised MI ties within 0.01, and its worst-recovered hypothesis is recovered more often"
	case 2:
		why = "normalised MI and worst-case recovery tie within 0.01, and its parameters are recovered better"
	case 3:
		why = "it identifies the hypotheses as well (within 0.01 on every measure) in less testing time"
	default:
		why = "the designs tie on every measure and on testing time; it comes first by name"
	}
	cost := fmt.Sprintf("at the same %s minutes per participant", minutes(a.MinutesPerParticipant))
	if a.MinutesPerParticipant != b.MinutesPerParticipant || a.TrialsPerParticipant != b.TrialsPerParticipant {
		cost = fmt.Sprintf("at %s vs %s minutes (%d vs %d trials) per participant", minutes(a.MinutesPerParticipant), minutes(b.MinutesPerParticipant),
			a.TrialsPerParticipant, b.TrialsPerParticipant)
	}
	over := b.Design
	if len(rows) > 2 {
		over = fmt.Sprintf("%s, the runner-up of %d designs", b.Design, len(rows))
	}
	out := fmt.Sprintf("Prefer %s over %s: %s. Normalised MI %s vs %s, worst-case recovery %s vs %s, mean parameter r %s vs %s, %s.",
		a.Design, over, why, f2(a.NormalizedMI), f2(b.NormalizedMI), f2(a.WorstDiagonal), f2(b.WorstDiagonal),
		f2(a.ParameterR), f2(b.ParameterR), cost)
	if len(groups) == 2 && groups[0] != nil && groups[1] != nil {
		count := func(g *GroupReport) int {
			n := 0
			for _, v := range g.SampleSize {
				if v != nil {
					n++
				}
			}
			return n
		}
		out += fmt.Sprintf(" At the group level it reaches the target rate for %d of %d hypotheses within the sizes tried, vs %d.",
			count(groups[0]), len(groups[0].SampleSize), count(groups[1]))
	}
	return out
}
