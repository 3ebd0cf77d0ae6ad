package recovery

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mathext"
	"gonum.org/v1/gonum/stat/distuv"
)

// BMS constants (Stephan et al. 2009, NeuroImage 46:1004): the Dirichlet
// prior α0 = 1 is flat over model frequencies; the iteration stops when no
// α_k moves by more than bmsTol, or after bmsMaxIter updates.
const (
	bmsAlpha0  = 1.0
	bmsTol     = 1e-6
	bmsMaxIter = 1000
)

// BMSResult is the outcome of random-effects Bayesian model selection over
// one group of participants, models in the order of the evidence columns.
type BMSResult struct {
	// Alpha is the posterior Dirichlet parameter over model frequencies r.
	Alpha []float64
	// Expected is the posterior mean frequency E[r_k] = α_k/Σα.
	Expected []float64
	// XP is the exceedance probability P(r_k > r_j for all j ≠ k | y).
	XP []float64
	// PXP is the protected exceedance probability XP·(1 − BOR) + BOR/K.
	PXP []float64
	// BOR is the Bayesian omnibus risk, the posterior probability that all
	// model frequencies are equal (Rigoux et al. 2014).
	BOR float64
	// FreeEnergy is F1, the variational lower bound on ln p(y | RFX model);
	// NullEvidence is F0 = ln p(y | all frequencies 1/K), exact.
	FreeEnergy, NullEvidence float64
	// Iterations is the number of variational updates of α; Converged is
	// false when the limit of 1000 was reached first.
	Iterations int
	Converged  bool
	// XPMCError is the largest Monte Carlo standard error of XP,
	// max_k √(XP_k(1 − XP_k)/samples); 0 when XP is exact (K = 2).
	XPMCError float64
}

// BMS performs random-effects Bayesian model selection on log model evidence
// logEvidence[n][k] of participant n under model k (for example −BIC/2), by
// the variational Bayes scheme of Stephan et al. 2009 (NeuroImage 46:1004),
// with the protected exceedance probabilities and Bayesian omnibus risk of
// Rigoux et al. 2014 (NeuroImage 84:971).
//
// Variational updates, from α = α0 = 1, repeated until max_k |Δα_k| < 1e-6
// or 1000 iterations (the normalisation is a log-sum-exp, so large evidence
// differences do not overflow):
//
//	ln u_nk = lme_nk + ψ(α_k) − ψ(Σ_k α_k),   g_nk = u_nk / Σ_k u_nk
//	α_k = α0 + Σ_n g_nk
//
// Exceedance probabilities: for K = 2 exactly, r_1 ~ Beta(α_1, α_2) and
//
//	XP_1 = P(r_1 > 1/2) = 1 − I_{1/2}(α_1, α_2),  XP_2 = I_{1/2}(α_1, α_2)
//
// (I the regularised incomplete beta, gonum mathext.RegIncBeta); for K > 2
// by Monte Carlo with `samples` draws r ~ Dir(α), each drawn as independent
// Gamma(α_k, 1) variates (gonum distuv.Gamma with Src = rng: Marsaglia &
// Tsang 2000, ACM TOMS 26:363, for α_k > 1 and an exponential draw for
// α_k = 1; α_k ≥ α0 = 1 always). The argmax of the gammas is the argmax of
// r, so they need not be normalised.
//
// Omnibus risk. With q(r) = Dir(α) and q(m_n) = Cat(g_n) at the final α (g
// recomputed from it), the free energy of the RFX model is (Stephan 2009,
// appendix) F1 = E[ln p(y|m)] + E[ln p(m|r)] + E[ln p(r)] − E[ln q(r)] − E[ln q(m)]:
//
//	E[ln p(y|m)] = Σ_nk g_nk lme_nk
//	E[ln p(m|r)] = Σ_nk g_nk ℓ_k,               ℓ_k = E[ln r_k] = ψ(α_k) − ψ(Σα)
//	E[ln p(r)]   = ln Γ(Kα0) − K ln Γ(α0) + Σ_k (α0 − 1) ℓ_k
//	E[ln q(r)]   = ln Γ(Σα) − Σ_k ln Γ(α_k) + Σ_k (α_k − 1) ℓ_k
//	E[ln q(m)]   = Σ_nk g_nk ln g_nk
//
// Under the null H0 every frequency is fixed at 1/K, each participant's
// model is an independent draw from it, and the evidence is exact:
//
//	F0 = ln Π_n Σ_k (1/K) exp(lme_nk) = Σ_n ln Σ_k exp(lme_nk) − N ln K
//
// With equal prior odds on H0 and the RFX model (Rigoux 2014),
//
//	BOR = P(H0 | y) = 1 / (1 + exp(F1 − F0)),   PXP_k = XP_k (1 − BOR) + BOR/K
//
// BMS panics (caller bugs) when there is no participant, fewer than 2
// models, a ragged row, a non-finite log evidence (drop failed fits first),
// or, for K > 2, a nil rng or samples < 1. The same rng state gives the same
// result.
func BMS(logEvidence [][]float64, rng *rand.Rand, samples int) BMSResult {
	nPart, k := checkEvidence("BMS", logEvidence)
	if k > 2 {
		if rng == nil {
			panic("recovery: BMS: nil rng, needed for Monte Carlo exceedance with more than 2 models")
		}
		if samples < 1 {
			panic(fmt.Sprintf("recovery: BMS: samples = %d, want ≥ 1 for Monte Carlo exceedance with more than 2 models", samples))
		}
	}

	res := BMSResult{Alpha: make([]float64, k)}
	for j := range res.Alpha {
		res.Alpha[j] = bmsAlpha0
	}
	logG := make([][]float64, nPart) // ln g_nk
	for n := range logG {
		logG[n] = make([]float64, k)
	}
	elnr := make([]float64, k)
	// posterior sets logG from the current α and returns Σ_n ln Σ_k u_nk.
	posterior := func() float64 {
		var sa float64
		for _, a := range res.Alpha {
			sa += a
		}
		ds := mathext.Digamma(sa)
		for j, a := range res.Alpha {
			elnr[j] = mathext.Digamma(a) - ds
		}
		var total float64
		for n, row := range logEvidence {
			for j, v := range row {
				logG[n][j] = v + elnr[j]
			}
			lse := logSumExpRow(logG[n])
			for j := range logG[n] {
				logG[n][j] -= lse
			}
			total += lse
		}
		return total
	}

	next := make([]float64, k)
	for res.Iterations < bmsMaxIter {
		posterior()
		for j := range next {
			next[j] = bmsAlpha0
		}
		for n := range logG {
			for j, lg := range logG[n] {
				next[j] += math.Exp(lg)
			}
		}
		var delta float64
		for j := range next {
			delta = math.Max(delta, math.Abs(next[j]-res.Alpha[j]))
		}
		copy(res.Alpha, next)
		res.Iterations++
		if delta < bmsTol {
			res.Converged = true
			break
		}
	}

	var sa float64
	for _, a := range res.Alpha {
		sa += a
	}
	res.Expected = make([]float64, k)
	for j, a := range res.Alpha {
		res.Expected[j] = a / sa
	}

	// Free energy of the RFX model, term by term.
	posterior()
	var eLik, eMod, eLogQm float64
	for n, row := range logEvidence {
		for j, v := range row {
			g := math.Exp(logG[n][j])
			eLik += g * v
			eMod += g * elnr[j]
			eLogQm += g * logG[n][j]
		}
	}
	lgSum := func(x float64) float64 { v, _ := math.Lgamma(x); return v }
	kf := float64(k)
	ePrior := lgSum(kf*bmsAlpha0) - kf*lgSum(bmsAlpha0)
	eLogQr := lgSum(sa)
	for j, a := range res.Alpha {
		ePrior += (bmsAlpha0 - 1) * elnr[j]
		eLogQr += -lgSum(a) + (a-1)*elnr[j]
	}
	res.FreeEnergy = eLik + eMod + ePrior - eLogQr - eLogQm

	for _, row := range logEvidence {
		res.NullEvidence += logSumExpRow(row) - math.Log(kf)
	}
	// 1/(1+e^x) is 0 for x → +Inf and 1 for x → −Inf, so no guard is needed.
	res.BOR = 1 / (1 + math.Exp(res.FreeEnergy-res.NullEvidence))

	res.XP = make([]float64, k)
	if k == 2 {
		res.XP[1] = mathext.RegIncBeta(res.Alpha[0], res.Alpha[1], 0.5)
		res.XP[0] = 1 - res.XP[1]
	} else {
		gammas := make([]distuv.Gamma, k)
		for j, a := range res.Alpha {
			gammas[j] = distuv.Gamma{Alpha: a, Beta: 1, Src: rng}
		}
		wins := make([]int, k)
		for s := 0; s < samples; s++ {
			best, bestJ := math.Inf(-1), 0
			for j := range gammas {
				if v := gammas[j].Rand(); v > best {
					best, bestJ = v, j
				}
			}
			wins[bestJ]++
		}
		for j, w := range wins {
			p := float64(w) / float64(samples)
			res.XP[j] = p
			res.XPMCError = math.Max(res.XPMCError, math.Sqrt(p*(1-p)/float64(samples)))
		}
	}
	res.PXP = make([]float64, k)
	for j, xp := range res.XP {
		res.PXP[j] = xp*(1-res.BOR) + res.BOR/kf
	}
	return res
}

// logSumExpRow returns ln Σ_i exp(x_i) without overflow, shifting by the
// maximum (common practice).
func logSumExpRow(x []float64) float64 {
	m := math.Inf(-1)
	for _, v := range x {
		m = math.Max(m, v)
	}
	if math.IsInf(m, 0) {
		return m
	}
	var s float64
	for _, v := range x {
		s += math.Exp(v - m)
	}
	return m + math.Log(s)
}

// checkEvidence panics unless logEvidence is a non-empty, rectangular,
// finite participants × models matrix with at least 2 models; it returns
// its dimensions.
func checkEvidence(fn string, logEvidence [][]float64) (nPart, k int) {
	nPart = len(logEvidence)
	if nPart == 0 {
		panic("recovery: " + fn + ": no participants in logEvidence")
	}
	k = len(logEvidence[0])
	if k < 2 {
		panic(fmt.Sprintf("recovery: %s: %d models, want at least 2", fn, k))
	}
	for n, row := range logEvidence {
		if len(row) != k {
			panic(fmt.Sprintf("recovery: %s: logEvidence[%d] has %d models, want %d", fn, n, len(row), k))
		}
		for j, v := range row {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				panic(fmt.Sprintf("recovery: %s: logEvidence[%d][%d] = %v, want a finite value (drop failed fits before BMS)", fn, n, j, v))
			}
		}
	}
	return nPart, k
}
