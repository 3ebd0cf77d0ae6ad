package recovery

// Method records the constants of the method a report was made with, so
// that a stored report quotes its own settings (report.json's "method"
// block); the method notes of report.html read them from here, not from
// the code that happens to render them. Fractions are of the quantity the
// field's comment names.
type Method struct {
	// Starts is the number of Nelder–Mead runs per fit, from the best grid
	// nodes at least StartSpacing grid steps apart along some parameter.
	Starts       int `json:"starts"`
	StartSpacing int `json:"start_spacing"`
	// RescoreWindow: every run whose grid −ln L ends within this of the
	// best run's is re-scored with exact predictions.
	RescoreWindow float64 `json:"rescore_window"`
	// LapseMax and ARMax bound the searched measurement parameters: the
	// lapse rate in (0, LapseMax), eeg_ar in (−ARMax, ARMax).
	LapseMax float64 `json:"lapse_max"`
	ARMax    float64 `json:"ar_max"`
	// The stopping rules of one Nelder–Mead run, in the logit-transformed
	// space: an initial simplex of size SearchSimplex; at most
	// SearchEvalsPerDim evaluations per searched dimension; converged when
	// the best value improves by less than SearchAbsTol + SearchRelTol·|best|
	// over SearchStallPerDim iterations per dimension, or at once when
	// every vertex's value lies within SearchSpread.
	SearchSimplex     float64 `json:"search_simplex"`
	SearchEvalsPerDim int     `json:"search_evals_per_dim"`
	SearchAbsTol      float64 `json:"search_abs_tol"`
	SearchRelTol      float64 `json:"search_rel_tol"`
	SearchStallPerDim int     `json:"search_stall_per_dim"`
	SearchSpread      float64 `json:"search_spread"`
	// GridNodes1D to GridNodes4D are the prediction grid's nodes per free
	// parameter for a candidate with 1 to 4 free parameters (a candidate
	// with more has no grid and is searched on exact predictions).
	GridNodes1D int `json:"grid_nodes_1d"`
	GridNodes2D int `json:"grid_nodes_2d"`
	GridNodes3D int `json:"grid_nodes_3d"`
	GridNodes4D int `json:"grid_nodes_4d"`
	// SurrogatePoints is the number of random points at which each grid's
	// interpolation error is measured against exact predictions.
	SurrogatePoints int `json:"surrogate_points"`
	// Standard errors (secondary to the profile intervals, on the grid): the rough Hessian pass steps SERoughStep of each
	// parameter's range, the fine pass SEFineStep of the rough SE; an SE
	// that changes by more than SEMaxChange (relative) between steps h and
	// 2h is unreliable; a parameter within SEEdge of its range of a bound
	// is held fixed.
	SERoughStep float64 `json:"se_rough_step"`
	SEFineStep  float64 `json:"se_fine_step"`
	SEMaxChange float64 `json:"se_max_change"`
	SEEdge      float64 `json:"se_edge"`
	// FlatSE: a parameter whose median SE exceeds this fraction of its
	// range is flagged as poorly identified (FlatProfile).
	FlatSE float64 `json:"flat_se"`
	// TieTolerance: candidates whose criterion values differ by at most
	// this share a dataset's win (WinShares).
	TieTolerance float64 `json:"tie_tolerance"`
	// BMSTolerance and BMSMaxIterations stop the variational updates of
	// random-effects model selection.
	BMSTolerance     float64 `json:"bms_tolerance"`
	BMSMaxIterations int     `json:"bms_max_iterations"`
	// GroupBootstrapRounds is the number of times the outer bootstrap of
	// the group recovery intervals resamples each generator's pool.
	GroupBootstrapRounds int `json:"group_bootstrap_rounds"`
	// Grid refinement of one-parameter grids: a cell is split while its
	// midpoint's interpolation error costs more than GridTolerance of ln L
	// for a typical dataset; a cell narrower than JumpWidth of the range
	// still over tolerance is a jump; at most RefineBudget nodes are added.
	GridTolerance float64 `json:"grid_tolerance"`
	JumpWidth     float64 `json:"jump_width"`
	RefineBudget  int     `json:"refine_budget"`
	// Grid refinement of larger grids: interpolation tested at
	// RefineCheckPoints Halton points; where a point not at a jump is over
	// tolerance, node lines are added through its cell along the axes
	// that carry the error (cells of at least RefineMinWidth initial
	// cells), at most RefineBudgetShare of the initial nodes, in
	// RefineRounds rounds at most.
	RefineCheckPoints int     `json:"refine_check_points"`
	RefineRounds      int     `json:"refine_rounds"`
	RefineBudgetShare float64 `json:"refine_budget_share"`
	RefineMinWidth    float64 `json:"refine_min_width"`
	// Exact polish of every candidate within ContentionWindow criterion
	// units of a dataset's best (and of every self-fit): up to ModeTries
	// other grid modes within ModeWindow ln-units scored exactly, then the
	// best point refined: deep (self-fits and fits within DeepWindow of
	// the best) by Brent's method on a bracket of PolishFirstStep cells
	// to PolishMinStep cells (or PolishLineEvals evaluations; it also
	// stops inside PolishFlatWidth cells once three evaluations gained
	// less than PolishFlat) for one parameter, by a compass search of at
	// most PolishCompassEvalsPerDim evaluations per parameter for more;
	// quick (the rest in contention) by a compass search of at most
	// PolishQuickEvalsPerDim. The search on the grid does not count an
	// improvement below GridSearchAbsTol; runs ending within SameRunWidth
	// of the range of one already re-scored are one optimum.
	ContentionWindow float64 `json:"contention_window"`
	ModeWindow       float64 `json:"mode_window"`
	ModeTries        int     `json:"mode_tries"`
	// A deep polish scores ModeTriesDeep modes and refines each within
	// ModeRepolishWindow of the best quickly, and deeply when that brings
	// it within ModeScreenWindow.
	ModeTriesDeep            int     `json:"mode_tries_deep"`
	ModeRepolishWindow       float64 `json:"mode_repolish_window"`
	ModeScreenWindow         float64 `json:"mode_screen_window"`
	PolishFirstStep          float64 `json:"polish_first_step"`
	PolishMinStep            float64 `json:"polish_min_step"`
	PolishLineEvals          int     `json:"polish_line_evals"`
	PolishCompassEvalsPerDim int     `json:"polish_compass_evals_per_dim"`
	PolishFlat               float64 `json:"polish_flat"`
	PolishFlatWidth          float64 `json:"polish_flat_width"`
	PolishQuickEvalsPerDim   int     `json:"polish_quick_evals_per_dim"`
	PolishShrink             float64 `json:"polish_shrink"`
	DeepWindow               float64 `json:"deep_window"`
	GridSearchAbsTol         float64 `json:"grid_search_abs_tol"`
	SameRunWidth             float64 `json:"same_run_width"`
	// ProfileThreshold is χ²₁(0.95)/2, the rise of the profile −ln L that
	// bounds a 95% profile-likelihood interval.
	ProfileThreshold float64 `json:"profile_threshold"`
	// TruthTolerance: a self-fit whose ln L ends more than this below the
	// ln L at the generating parameters counts as below the truth.
	TruthTolerance float64 `json:"truth_tolerance"`
}

// CurrentMethod returns the constants this build of recovery fits and
// summarises with; Assemble writes them into every report.
func CurrentMethod() Method {
	return Method{
		Starts: nStarts, StartSpacing: startSpacing, RescoreWindow: rescoreWindow,
		LapseMax: lapseMax, ARMax: arMax,
		SearchSimplex: searchSimplex, SearchEvalsPerDim: searchEvalsPerDim, SearchAbsTol: searchAbsolute,
		SearchRelTol: searchRelative, SearchStallPerDim: searchStallPerDim, SearchSpread: searchSpread,
		GridNodes1D: gridPoints[1], GridNodes2D: gridPoints[2], GridNodes3D: gridPoints[3], GridNodes4D: gridPoints[4],
		SurrogatePoints: surrogatePoints,
		SERoughStep:     seRoughStep, SEFineStep: seFineStep, SEMaxChange: hessianMaxSEChange, SEEdge: seEdge,
		FlatSE:       flatSE,
		TieTolerance: TieTolerance,
		BMSTolerance: bmsTol, BMSMaxIterations: bmsMaxIter, GroupBootstrapRounds: groupBootstrapRounds,
		GridTolerance: gridTolerance, JumpWidth: jumpWidth, RefineBudget: refineBudget,
		RefineCheckPoints: ndCheckPoints, RefineRounds: ndRounds, RefineBudgetShare: ndBudgetShare, RefineMinWidth: ndMinWidth,
		ContentionWindow: contentionWindow, ModeWindow: modeWindow, ModeTries: modeTries,
		ModeTriesDeep: modeTriesDeep, ModeRepolishWindow: modeRepolishWindow, ModeScreenWindow: modeScreenWindow,
		PolishFirstStep: polishFirstStep, PolishMinStep: polishMinStep, PolishLineEvals: polishLineEvals, PolishCompassEvalsPerDim: polishCompassEvalsPerDim, PolishFlat: polishFlat, PolishFlatWidth: polishFlatWidth,
		PolishQuickEvalsPerDim: polishQuickEvalsPerDim, PolishShrink: polishShrink, DeepWindow: deepWindow, GridSearchAbsTol: gridSearchAbsolute, SameRunWidth: sameRunWidth,
		ProfileThreshold: profileThreshold, TruthTolerance: truthTolerance,
	}
}
