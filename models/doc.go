// Package models turns a design and a precision hypothesis into exact
// predictions: the study file (designs, hypotheses, defaults), the six
// precision families γ(t), the active-inference listening agent and its
// readouts (docs/model.md §1–§3).
//
// Conventions. Designs are written in milliseconds; precision families take
// t in seconds since cue onset. RTs are in ms from target onset. Free
// parameter vectors are ordered by Hypothesis.FreeParams (sorted names).
// A zero design field means its documented default (Design.FillDefaults).
// Every probability is floored at 1e-9 before its log.
//
// Predictions are deterministic: the same design, hypothesis and parameters
// give the same bits. A Listener is read-only and safe for concurrent use;
// a Workspace and a Prediction belong to one goroutine. Caller bugs (wrong
// vector lengths, a workspace of another listener) panic with a "models:"
// prefix; bad study files and invalid designs are returned errors.
package models
