package recovery

import (
	"math"

	"discrimen/models"
)

// layout places one prediction set in a flat vector: valid RT, valid
// accuracy, invalid RT, invalid accuracy, misdirected (one entry per CTI
// each), then the neural bins. For the deterministic agent only the
// longest CTI's bins are kept (shorter CTIs use a prefix: the preparatory
// part is common to all CTIs). With precision_sd > 0 each CTI's bins are
// integrated on that CTI's own pieces (model.md §3b), so every CTI's bins
// are kept, one after another (perCTI).
type layout struct {
	C      int   // number of CTIs
	bins   []int // neural bins per CTI
	bmax   int
	perCTI bool
	off    []int // with perCTI, where CTI c's bins start after the 5·C entries
	total  int   // Σ bins
}

func newLayout(pr *models.Prediction) layout {
	l := layout{C: len(pr.CTIms)}
	for _, b := range pr.Neural {
		l.off = append(l.off, l.total)
		l.bins = append(l.bins, len(b))
		l.bmax = max(l.bmax, len(b))
		l.total += len(b)
	}
	return l
}

// newLayoutFor is the layout of listener l's predictions.
func newLayoutFor(l *models.Listener, pr *models.Prediction) layout {
	lay := newLayout(pr)
	lay.perCTI = l.PrecisionSD() > 0
	return lay
}

// neural is the number of neural entries stored.
func (l layout) neural() int {
	if l.perCTI {
		return l.total
	}
	return l.bmax
}

func (l layout) size() int { return 5*l.C + l.neural() }

func (l layout) vRT(c int) int  { return c }
func (l layout) vAcc(c int) int { return l.C + c }
func (l layout) iRT(c int) int  { return 2*l.C + c }
func (l layout) iAcc(c int) int { return 3*l.C + c }
func (l layout) iMis(c int) int { return 4*l.C + c }

// eeg is the index of the j-th stored neural entry.
func (l layout) eeg(j int) int { return 5*l.C + j }

// eegAt is the index of bin b of CTI c.
func (l layout) eegAt(c, b int) int {
	if l.perCTI {
		return 5*l.C + l.off[c] + b
	}
	return 5*l.C + b
}

// flatten writes pr into dst following l.
func (l layout) flatten(pr *models.Prediction, dst []float64) {
	for c := 0; c < l.C; c++ {
		dst[l.vRT(c)] = pr.Valid.RTms[c]
		dst[l.vAcc(c)] = pr.Valid.Accuracy[c]
		dst[l.iRT(c)] = pr.Invalid.RTms[c]
		dst[l.iAcc(c)] = pr.Invalid.Accuracy[c]
		dst[l.iMis(c)] = pr.Invalid.Misdirected[c]
	}
	if l.perCTI {
		for c := range l.bins {
			copy(dst[l.eegAt(c, 0):], pr.Neural[c])
		}
		return
	}
	longest := 0
	for c, b := range l.bins {
		if b > l.bins[longest] {
			longest = c
		}
	}
	copy(dst[5*l.C:], pr.Neural[longest])
}

// sufficientStats holds a dataset's sufficient statistics: the likelihood of §5
// depends on the trial table only through them.
type sufficientStats struct {
	measRT, measAcc, measEEG bool
	items                    float64
	// per class (0 valid, 1 invalid) and CTI
	rtN, rtMean [2][]float64
	rtSSWithin  float64 // Σ (rt − cell mean)²
	nT, nC, nO  [2][]float64
	eeg         [][]float64
	nRT, nAcc   int
	nEEG        int
}

func summarise(d *models.Design, ds *Dataset) *sufficientStats {
	C := len(d.CTIms)
	s := &sufficientStats{measRT: d.HasMeasure("rt"), measAcc: d.HasMeasure("accuracy"), measEEG: d.HasMeasure("eeg"), items: float64(d.Items)}
	for k := 0; k < 2; k++ {
		s.rtN[k] = make([]float64, C)
		s.rtMean[k] = make([]float64, C)
		s.nT[k] = make([]float64, C)
		s.nC[k] = make([]float64, C)
		s.nO[k] = make([]float64, C)
	}
	for _, t := range ds.Trials {
		k := 0
		if !t.Valid {
			k = 1
		}
		switch t.Report {
		case ReportTarget:
			s.nT[k][t.CTI]++
		case ReportCued:
			s.nC[k][t.CTI]++
		default:
			s.nO[k][t.CTI]++
		}
		if s.measRT && !math.IsNaN(t.RTms) {
			s.rtN[k][t.CTI]++
			s.rtMean[k][t.CTI] += t.RTms
		}
	}
	for k := 0; k < 2; k++ {
		for c := range s.rtN[k] {
			if n := s.rtN[k][c]; n > 0 {
				s.rtMean[k][c] /= n
				s.nRT += int(n)
			}
		}
	}
	for _, t := range ds.Trials {
		if s.measRT && !math.IsNaN(t.RTms) {
			k := 0
			if !t.Valid {
				k = 1
			}
			dv := t.RTms - s.rtMean[k][t.CTI]
			s.rtSSWithin += dv * dv
		}
	}
	if s.measAcc {
		s.nAcc = len(ds.Trials)
	}
	if s.measEEG {
		s.eeg = ds.EEG
		for _, y := range ds.EEG {
			s.nEEG += len(y)
		}
	}
	return s
}

// nObs is n of the criteria: RT observations, accuracy trials and EEG bins.
func (s *sufficientStats) nObs() int { return s.nRT + s.nAcc + s.nEEG }

// nMeasurement counts the measurement parameters in k: rt_base, rt_scale,
// rt_sd; lapse; eeg_offset, eeg_gain, eeg_sd, eeg_ar.
func (s *sufficientStats) nMeasurement() int {
	k := 0
	if s.measRT && s.nRT > 0 {
		k += 3
	}
	if s.measAcc {
		k++
	}
	if s.measEEG {
		k += 4
	}
	return k
}

// nonnegLS2 solves the least squares problem with an intercept b and a
// slope s ≥ 0 from the normal-equation sums
//
//	[s11 s12; s12 s22]·[b; s] = [s1y; s2y]
//
// returning b, s and the reduction in the residual sum of squares
// 2(b·s1y + s·s2y) − (b²s11 + 2bs·s12 + s²s22). The constraint s ≥ 0 keeps a
// candidate from fitting the data's pattern upside down; a degenerate slope
// regressor (a flat prediction) gives s = 0. So does one whose spread about
// the intercept's direction is below flatRegressor of the intercept
// regressor's scale,
//
//	s22 − s12²/s11 ≤ flatRegressor² · s11,
//
// a prediction flat but for rounding (a constant hypothesis's neural
// signal is 0 ± 1e-16 after baseline correction): a relative test alone
// lets the slope scale that noise up by 1e14 and fit the data's noise.
// flatRegressor is the spread, in the units of the prediction (gain units
// for the neural signal), below which nonnegLS2 treats the slope regressor
// as flat: far above rounding (1e-16) and far below any signal a design
// could measure.
const flatRegressor = 1e-9

func nonnegLS2(s11, s12, s22, s1y, s2y float64) (b, s, reduction float64) {
	det := s11*s22 - s12*s12
	if s11 <= 0 {
		return 0, 0, 0
	}
	if det > 1e-12*s11*s22 && s22 > 0 && det > flatRegressor*flatRegressor*s11*s11 {
		s = (s11*s2y - s12*s1y) / det
		if s > 0 {
			b = (s1y - s*s12) / s11
			return b, s, 2*(b*s1y+s*s2y) - (b*b*s11 + 2*b*s*s12 + s*s*s22)
		}
	}
	b = s1y / s11
	return b, 0, b * s1y
}

// boxLS2 solves least squares with intercept b ≥ 0 and slope s ≥ 0 from
// the normal-equation sums (as nonnegLS2). Used for RT: rt_base is a
// non-decision time and cannot be negative; without the bound a candidate
// with slow predictions fits any RT pattern by a negative base and a large
// scale. The problem is a convex quadratic, so its minimum over the box is
// the best of the interior solution, the optimum on each edge and the
// corner that are feasible.
func boxLS2(s11, s12, s22, s1y, s2y float64) (b, s, reduction float64) {
	red := func(b, s float64) float64 { return 2*(b*s1y+s*s2y) - (b*b*s11 + 2*b*s*s12 + s*s*s22) }
	best := 0.0 // the corner b = s = 0
	if s11 > 0 {
		if bb := s1y / s11; bb > 0 && red(bb, 0) > best {
			b, s, best = bb, 0, red(bb, 0)
		}
	}
	if s22 > 0 {
		if ss := s2y / s22; ss > 0 && red(0, ss) > best {
			b, s, best = 0, ss, red(0, ss)
		}
	}
	if det := s11*s22 - s12*s12; det > 1e-12*s11*s22 {
		bb := (s22*s1y - s12*s2y) / det
		ss := (s11*s2y - s12*s1y) / det
		if bb >= 0 && ss >= 0 && red(bb, ss) > best {
			b, s, best = bb, ss, red(bb, ss)
		}
	}
	return b, s, best
}

// logLik is −ln L of model.md §5 for predictions pred (flat, layout lay),
// with lapse and the EEG AR coefficient given and the linear measurement
// parameters profiled out. It fills est with every measurement estimate.
func logLik(s *sufficientStats, lay layout, pred []float64, lapse, ar float64, est *Measurement) float64 {
	ll := 0.0
	const ln2pi = 1.8378770664093453
	if s.measRT && s.nRT > 0 {
		// Weighted least squares of cell means on predicted RT (weights:
		// cell counts); RSS = within-cell SS + weighted between-cell SS.
		var w, wm, wmm, wy, wmy, wyy float64
		for k := 0; k < 2; k++ {
			for c := 0; c < lay.C; c++ {
				n := s.rtN[k][c]
				if n == 0 {
					continue
				}
				m := pred[lay.vRT(c)]
				if k == 1 {
					m = pred[lay.iRT(c)]
				}
				y := s.rtMean[k][c]
				w += n
				wm += n * m
				wmm += n * m * m
				wy += n * y
				wmy += n * m * y
				wyy += n * y * y
			}
		}
		b, sc, red := boxLS2(w, wm, wmm, wy, wmy)
		rss := s.rtSSWithin + wyy - red
		n := float64(s.nRT)
		rss = math.Max(rss, 1e-9*n)
		v := rss / n
		ll += -0.5 * n * (ln2pi + math.Log(v) + 1)
		if est != nil {
			est.RTBase, est.RTScale, est.RTSD = b, sc, math.Sqrt(v)
		}
	}
	if s.measAcc {
		V := s.items
		for c := 0; c < lay.C; c++ {
			pT := (1-lapse)*pred[lay.vAcc(c)] + lapse/V
			ll += s.nT[0][c]*flog(pT) + (s.nC[0][c]+s.nO[0][c])*flog(1-pT)
			pT = (1-lapse)*pred[lay.iAcc(c)] + lapse/V
			pC := (1-lapse)*pred[lay.iMis(c)] + lapse/V
			ll += s.nT[1][c]*flog(pT) + s.nC[1][c]*flog(pC) + s.nO[1][c]*flog(1-pT-pC)
		}
		if est != nil {
			est.Lapse = lapse
		}
	}
	if s.measEEG {
		// Exact AR(1) likelihood by the Prais–Winsten transform (Prais &
		// Winsten 1954): first row scaled by √(1−ρ²), later rows
		// differenced, then least squares on [1, e] with gain ≥ 0.
		q := math.Sqrt(1 - ar*ar)
		var s11, s12, s22, s1y, s2y, syy float64
		series := 0
		for c, y := range s.eeg {
			if len(y) == 0 {
				continue
			}
			series++
			for b := range y {
				var x1, x2, yy float64
				e := pred[lay.eegAt(c, b)]
				if b == 0 {
					x1, x2, yy = q, q*e, q*y[0]
				} else {
					x1, x2, yy = 1-ar, e-ar*pred[lay.eegAt(c, b-1)], y[b]-ar*y[b-1]
				}
				s11 += x1 * x1
				s12 += x1 * x2
				s22 += x2 * x2
				s1y += x1 * yy
				s2y += x2 * yy
				syy += yy * yy
			}
		}
		b, g, red := nonnegLS2(s11, s12, s22, s1y, s2y)
		n := float64(s.nEEG)
		rss := math.Max(syy-red, 1e-12*n)
		v := rss / n
		ll += -0.5*n*(ln2pi+math.Log(v)+1) + float64(series)*math.Log(q)
		if est != nil {
			est.EEGOffset, est.EEGGain, est.EEGSD, est.EEGAR = b, g, math.Sqrt(v)/q, ar
		}
	}
	return -ll
}

// flog is ln(max(p, 1e-9)), the floor of model.md §3 applied to the
// likelihood's probabilities as well.
func flog(p float64) float64 { return math.Log(math.Max(p, 1e-9)) }
