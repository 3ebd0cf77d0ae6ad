package api

import (
	"context"
	"encoding/json"
	"errors"
	"net/http"

	"discrimen/models"
	"discrimen/worker"
)

// Field is one problem with one part of a request: Path is a JSON path in
// dotted form into the body ("designs[0].validity") or a query parameter's
// name; empty means the request as a whole.
type Field struct {
	Path    string `json:"path"`
	Problem string `json:"problem"`
}

// Error is the body of every error response:
//
//	{"error": {"code": "...", "message": "...", "fields": [{"path", "problem"}]}}
type Error struct {
	Status  int     `json:"-"`
	Code    string  `json:"code"`
	Message string  `json:"message"`
	Fields  []Field `json:"fields"`
}

func (e *Error) Error() string { return e.Code + ": " + e.Message }

// The error codes, one per kind of failure a client can act on.
const (
	codeInvalidStudy     = "invalid_study"
	codeInvalidQuery     = "invalid_query"
	codeBodyTooLarge     = "body_too_large"
	codeUnsupportedMedia = "unsupported_media_type"
	codeOverBudget       = "over_compute_cap"
	codeUnauthorized     = "unauthorized"
	codeRateLimited      = "rate_limited"
	codeNotFound         = "not_found"
	codeMethodNotAllowed = "method_not_allowed"
	codeNotAcceptable    = "not_acceptable"
	codeNotFinished      = "not_finished"
	codeAlreadyFinished  = "already_finished"
	codeNotReady         = "not_ready"
	codeInternal         = "internal"
)

func newError(status int, code, message string, fields ...Field) *Error {
	if fields == nil {
		fields = []Field{}
	}
	return &Error{Status: status, Code: code, Message: message, Fields: fields}
}

// fromProblems turns a study file's problems into a 400.
func fromProblems(ve *models.ValidationError) *Error {
	fields := make([]Field, len(ve.Problems))
	for i, p := range ve.Problems {
		fields[i] = Field{Path: p.Path, Problem: p.Problem}
	}
	msg := "the study has 1 problem"
	if len(fields) != 1 {
		msg = "the study has " + itoa(len(fields)) + " problems"
	}
	if ve.OverBudget {
		// A well-formed study over the study file's own limit is over
		// every server's cap: 422 like the configured cap, with the number.
		return newError(http.StatusUnprocessableEntity, codeOverBudget, ve.Problems[0].Problem, fields...)
	}
	return newError(http.StatusBadRequest, codeInvalidStudy, msg, fields...)
}

// fromBackend maps the worker's errors to HTTP in this one place.
func fromBackend(err error) *Error {
	var ae *Error
	switch {
	case errors.As(err, &ae):
		return ae
	case errors.Is(err, worker.ErrNotFound):
		return newError(http.StatusNotFound, codeNotFound, "no such study")
	case errors.Is(err, worker.ErrNotDone):
		return newError(http.StatusConflict, codeNotFinished, "the study has not finished; its report is not ready")
	case errors.Is(err, worker.ErrFinished):
		return newError(http.StatusConflict, codeAlreadyFinished, "the study already finished; there is nothing to cancel")
	case errors.Is(err, context.DeadlineExceeded), errors.Is(err, context.Canceled):
		return newError(http.StatusServiceUnavailable, codeNotReady, "the study store did not answer in time")
	}
	return newError(http.StatusInternalServerError, codeInternal, "internal error")
}

func writeJSON(w http.ResponseWriter, status int, v any) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(status)
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	// v is one of this package's plain bodies, which always encode, so only
	// the write to a client that left can fail, after the status is sent.
	_ = enc.Encode(v)
}

func writeError(w http.ResponseWriter, e *Error) {
	writeJSON(w, e.Status, map[string]*Error{"error": e})
}
