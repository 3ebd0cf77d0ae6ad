package recovery

import (
	"fmt"
	"math"
)

// AIC returns Akaike's information criterion of a fit with maximised log
// likelihood logL and k free parameters (Akaike 1974, IEEE Transactions on
// Automatic Control 19:716):
//
//	AIC = 2k − 2 ln L̂
//
// Smaller is better. AIC panics if k is negative.
func AIC(logL float64, k int) float64 {
	checkParamCount("AIC", k)
	return 2*float64(k) - 2*logL
}

// AICc returns AIC with the small-sample correction (Hurvich & Tsai 1989,
// Biometrika 76:297):
//
//	AICc = AIC + 2k(k+1)/(n − k − 1)
//
// It is +Inf when n − k − 1 ≤ 0, where the correction is undefined: such a
// fit has no residual degrees of freedom and must never win a comparison.
// AICc panics if k is negative or n is not positive.
func AICc(logL float64, k, n int) float64 {
	checkParamCount("AICc", k)
	checkObsCount("AICc", n)
	df := n - k - 1
	if df <= 0 {
		return math.Inf(1)
	}
	kf := float64(k)
	return AIC(logL, k) + 2*kf*(kf+1)/float64(df)
}

// BIC returns the Bayesian (Schwarz) information criterion of a fit with
// maximised log likelihood logL, k free parameters and n observations
// (Schwarz 1978, Annals of Statistics 6:461):
//
//	BIC = k ln n − 2 ln L̂
//
// −BIC/2 approximates the log model evidence used by BMS. BIC panics if k is
// negative or n is not positive.
func BIC(logL float64, k, n int) float64 {
	checkParamCount("BIC", k)
	checkObsCount("BIC", n)
	return float64(k)*math.Log(float64(n)) - 2*logL
}

func checkParamCount(fn string, k int) {
	if k < 0 {
		panic(fmt.Sprintf("recovery: %s: parameter count k = %d, want k ≥ 0", fn, k))
	}
}

func checkObsCount(fn string, n int) {
	if n <= 0 {
		panic(fmt.Sprintf("recovery: %s: observation count n = %d, want n ≥ 1", fn, n))
	}
}

// Criterion names an information criterion of the report. Its text is the
// key in report.json ("bic", "aic", "aicc").
type Criterion string

const (
	BICCriterion  Criterion = "bic"
	AICCriterion  Criterion = "aic"
	AICcCriterion Criterion = "aicc"
)

// Criteria lists the criteria in report order.
var Criteria = []Criterion{BICCriterion, AICCriterion, AICcCriterion}

// Label is the criterion as printed: BIC, AIC, AICc.
func (c Criterion) Label() string {
	switch c {
	case BICCriterion:
		return "BIC"
	case AICCriterion:
		return "AIC"
	case AICcCriterion:
		return "AICc"
	}
	panic(fmt.Sprintf("recovery: unknown criterion %q", string(c)))
}

// Of returns the criterion's value for fit f, NaN for a failed fit. An
// unknown criterion is a caller bug and panics: no silent fallback to BIC.
func (c Criterion) Of(f *Fit) float64 {
	if f.Failed {
		c.Label() // still panics on an unknown criterion
		return math.NaN()
	}
	switch c {
	case BICCriterion:
		return f.BIC
	case AICCriterion:
		return f.AIC
	case AICcCriterion:
		return f.AICc
	}
	panic(fmt.Sprintf("recovery: unknown criterion %q", string(c)))
}
