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
	Status int `json:"-"`
	// RetryAfter, when > 0, is sent as the Retry-After header, in seconds.
	RetryAfter int     `json:"-"`
	Code       string  `json:"code"`
	Message    string  `json:"message"`
	Fields     []Field `json:"fields"`
}

func (e *Error) Error() string { return e.Code + ": " + e.Message }

// The error codes, one per kind of failure a client can act on.
const (
	codeInvalidStudy     = "invalid_study"
	codeInvalidQuery     = "invalid_query"
	codeBodyTooLarge     = "body_too_large"
	codeUnsupportedMedia = "unsupported_media_type"
	codeOverBudget       = "over_compute_cap"
	codeOverSize         = "over_size_cap"
	codeOverReport       = "over_report_cap"
	codeOverQuota        = "over_quota"
	codeOverStorage      = "over_storage_quota"
	codeKeyReused        = "idempotency_key_reused"
	codeKeyInFlight      = "idempotency_key_in_flight"
	codeBadKey           = "invalid_idempotency_key"
	codeUnavailable      = "store_unavailable"
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
	if ve.OverLimit {
		// Over a size cap of the study file: well formed JSON the service
		// will not take apart, so 422 like the other caps.
		return newError(http.StatusUnprocessableEntity, codeOverSize,
			"the study is over the study file's size caps at "+itoa(len(fields))+" place(s), listed in fields; nothing else was checked", fields...)
	}
	if ve.OverBudget {
		// A well-formed study over the study file's own limit is over
		// every server's cap: 422 like the configured cap, with the number.
		return newError(http.StatusUnprocessableEntity, codeOverBudget, ve.Problems[0].Problem, fields...)
	}
	return newError(http.StatusBadRequest, codeInvalidStudy, msg, fields...)
}

// retryUnavailable is the Retry-After, in seconds, of a 503 while the
// study store cannot be reached: long enough for a restart or a failover
// to finish, short enough that a client polling a study loses little
// (common practice).
const retryUnavailable = 5

// unavailable is the answer of every endpoint that needs Redis while it
// cannot be reached.
func unavailable() *Error {
	e := newError(http.StatusServiceUnavailable, codeUnavailable,
		"the study store (Redis) is not reachable; retry after "+itoa(retryUnavailable)+" s")
	e.RetryAfter = retryUnavailable
	return e
}

// fromBackend maps the worker's errors to HTTP in this one place.
func fromBackend(err error) *Error {
	var ae *Error
	switch {
	case errors.As(err, &ae):
		return ae
	case errors.Is(err, worker.ErrKeyReused):
		return newError(http.StatusUnprocessableEntity, codeKeyReused,
			"this Idempotency-Key was used for another study file; use a new key for a new study", Field{Path: "Idempotency-Key", Problem: "already used for a different request body"})
	case errors.Is(err, worker.ErrKeyInFlight):
		e := newError(http.StatusConflict, codeKeyInFlight, "a request with this Idempotency-Key is still being answered; retry after 1 s")
		e.RetryAfter = 1
		return e
	case errors.Is(err, context.Canceled):
		// The client left; no one reads this answer.
		return newError(http.StatusServiceUnavailable, codeNotReady, "the request was canceled")
	case worker.Unavailable(err):
		return unavailable()
	case errors.Is(err, worker.ErrNotFound):
		return newError(http.StatusNotFound, codeNotFound, "no such study")
	case errors.Is(err, worker.ErrNotDone):
		return newError(http.StatusConflict, codeNotFinished, "the study has not finished; its report is not ready")
	case errors.Is(err, worker.ErrFinished):
		return newError(http.StatusConflict, codeAlreadyFinished, "the study already finished; there is nothing to cancel")
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
	if e.RetryAfter > 0 {
		w.Header().Set("Retry-After", itoa(e.RetryAfter))
	}
	writeJSON(w, e.Status, map[string]*Error{"error": e})
}
