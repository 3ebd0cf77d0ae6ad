package api

import (
	"context"
	"errors"
	"fmt"
	"io"
	"mime"
	"net/http"
	"strconv"
	"strings"
	"time"

	"discrimen/models"
	"discrimen/worker"
)

// statusBody is the JSON of GET /v1/studies/{id}.
type statusBody struct {
	ID         string       `json:"id"`
	Name       string       `json:"name"`
	Status     worker.State `json:"status"`
	Progress   progress     `json:"progress"`
	ETASeconds *float64     `json:"eta_seconds"`
	Created    time.Time    `json:"created"`
	Finished   *time.Time   `json:"finished"`
	Error      *string      `json:"error"`
	StatusURL  string       `json:"status_url"`
	ReportURL  string       `json:"report_url"`
}

// progress counts fits.
type progress struct {
	Done  int `json:"done"`
	Total int `json:"total"`
}

func statusURL(id string) string { return "/v1/studies/" + id }
func reportURL(id string) string { return "/v1/studies/" + id + "/report" }

func toBody(s worker.Status) statusBody {
	b := statusBody{
		ID: s.ID, Name: s.Name, Status: s.State, Progress: progress{Done: s.Done, Total: s.Total},
		Created: s.Created, StatusURL: statusURL(s.ID), ReportURL: reportURL(s.ID),
	}
	if s.ETA != nil {
		// Whole tenths of a second: finer is noise.
		v := float64(s.ETA.Milliseconds()/100) / 10
		b.ETASeconds = &v
	}
	if !s.Finished.IsZero() {
		f := s.Finished
		b.Finished = &f
	}
	if s.Error != "" {
		e := s.Error
		b.Error = &e
	}
	return b
}

// submitBody is the 202 answer to POST /v1/studies.
type submitBody struct {
	ID        string       `json:"id"`
	Status    worker.State `json:"status"`
	StatusURL string       `json:"status_url"`
	ReportURL string       `json:"report_url"`
	// Warnings are the study's warnings (models.Study.Warnings); [] when
	// there are none.
	Warnings []Field `json:"warnings"`
}

func (s *Server) submit(w http.ResponseWriter, r *http.Request) {
	if ct := r.Header.Get("Content-Type"); ct != "" {
		mt, _, err := mime.ParseMediaType(ct)
		if err != nil || mt != "application/json" {
			writeError(w, newError(http.StatusUnsupportedMediaType, codeUnsupportedMedia,
				fmt.Sprintf("send the study as application/json, not %q", ct)))
			return
		}
	}
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, s.cfg.MaxBodyBytes))
	if err != nil {
		var mb *http.MaxBytesError
		if errors.As(err, &mb) {
			writeError(w, newError(http.StatusRequestEntityTooLarge, codeBodyTooLarge,
				fmt.Sprintf("the body is over the limit of %d bytes", mb.Limit)))
			return
		}
		writeError(w, newError(http.StatusBadRequest, codeInvalidStudy, "could not read the body: "+err.Error()))
		return
	}
	study, warnings, err := models.CheckStudy(body)
	if err != nil {
		var ve *models.ValidationError
		if errors.As(err, &ve) {
			writeError(w, fromProblems(ve))
			return
		}
		writeError(w, newError(http.StatusBadRequest, codeInvalidStudy, err.Error(), Field{Problem: err.Error()}))
		return
	}
	if fits := study.TotalFits(); fits > s.cfg.MaxFits {
		msg := fmt.Sprintf("the study needs %d fits (participants × hypotheses² summed over designs); this server's cap is %d fits per study", fits, s.cfg.MaxFits)
		writeError(w, newError(http.StatusUnprocessableEntity, codeOverBudget, msg, budgetFields(study)...))
		return
	}
	key, kerr := idempotencyKey(r.Header)
	if kerr != nil {
		writeError(w, kerr)
		return
	}
	estimate := worker.EstimateReportBytes(study, len(body))
	if estimate > s.cfg.MaxReportBytes {
		writeError(w, newError(http.StatusUnprocessableEntity, codeOverReport, fmt.Sprintf(
			"the study's report is estimated at %d bytes, over this server's cap of %d bytes per study; cut participants, hypotheses or variants",
			estimate, s.cfg.MaxReportBytes), Field{Path: "designs", Problem: fmt.Sprintf("estimated report: %d bytes (cap %d)", estimate, s.cfg.MaxReportBytes)}))
		return
	}
	admit := func(ctx context.Context) error { return s.admit(ctx, owner(r), study.TotalFits(), estimate) }
	st, replayed, err := s.cfg.Backend.SubmitOnce(r.Context(), owner(r), key, body, study, estimate, admit)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	w.Header().Set("Location", statusURL(st.ID))
	warn := make([]Field, len(warnings))
	for i, p := range warnings {
		warn[i] = Field{Path: p.Path, Problem: p.Problem}
	}
	code := http.StatusAccepted
	if replayed {
		// The study of the first request with this key, as it is now.
		code = http.StatusOK
	}
	writeJSON(w, code, submitBody{ID: st.ID, Status: st.State, StatusURL: statusURL(st.ID), ReportURL: reportURL(st.ID), Warnings: warn})
}

// retryQuota is the Retry-After, in seconds, of a submit over a key's
// in-flight quota: about the time a small study takes to finish.
const retryQuota = 30

// admit checks owner's quotas for one more study of fits fits and an
// estimated report of estimate bytes. Concurrent submits of one key are
// checked against the same usage, so they may pass the quota together by
// at most their number (which the key's rate limit bounds).
func (s *Server) admit(ctx context.Context, owner string, fits int, estimate int64) error {
	u, err := s.cfg.Backend.Usage(ctx, owner)
	if err != nil {
		return err
	}
	over := func(what string, limit, used, adds int64) *Error {
		e := newError(http.StatusTooManyRequests, codeOverQuota, fmt.Sprintf(
			"over this key's quota of %d %s: %d in use, this study adds %d; retry once some of the key's studies finish",
			limit, what, used, adds))
		e.RetryAfter = retryQuota
		return e
	}
	switch {
	case u.StudiesInFlight+1 > s.cfg.MaxStudiesInFlight:
		return over("studies in flight (queued or running)", int64(s.cfg.MaxStudiesInFlight), int64(u.StudiesInFlight), 1)
	case u.FitsInFlight+fits > s.cfg.MaxFitsInFlight:
		return over("fits in flight", int64(s.cfg.MaxFitsInFlight), int64(u.FitsInFlight), int64(fits))
	case u.StoredBytes+estimate > s.cfg.MaxStoredBytes:
		return newError(http.StatusUnprocessableEntity, codeOverStorage, fmt.Sprintf(
			"over this key's quota of %d stored bytes: its studies store %d, this study's report is estimated at %d; space returns as studies expire",
			s.cfg.MaxStoredBytes, u.StoredBytes, estimate))
	}
	return nil
}

// maxIdempotencyKey caps the Idempotency-Key header's value, in bytes.
const maxIdempotencyKey = 255

// idempotencyKey reads the Idempotency-Key header: a structured-field
// string ("..."), as the IETF draft "The Idempotency-Key HTTP Header Field"
// writes it, or the bare value; "" when absent.
func idempotencyKey(h http.Header) (string, *Error) {
	vs := h.Values("Idempotency-Key")
	if len(vs) == 0 {
		return "", nil
	}
	bad := func(problem string) (string, *Error) {
		return "", newError(http.StatusBadRequest, codeBadKey, "bad Idempotency-Key header: "+problem,
			Field{Path: "Idempotency-Key", Problem: problem})
	}
	if len(vs) > 1 {
		return bad("send the header once")
	}
	v := strings.TrimSpace(vs[0])
	if len(v) >= 2 && v[0] == '"' && v[len(v)-1] == '"' {
		var b strings.Builder
		for i := 1; i < len(v)-1; i++ {
			c := v[i]
			if c == '\\' {
				i++
				if i == len(v)-1 || (v[i] != '"' && v[i] != '\\') {
					return bad(`a backslash in a quoted key must escape " or \`)
				}
				c = v[i]
			} else if c == '"' {
				return bad("a quote inside a quoted key must be escaped")
			}
			b.WriteByte(c)
		}
		v = b.String()
	}
	if v == "" || len(v) > maxIdempotencyKey {
		return bad(fmt.Sprintf("the key must be 1 to %d characters, got %d", maxIdempotencyKey, len(v)))
	}
	for i := 0; i < len(v); i++ {
		if v[i] < 0x20 || v[i] > 0x7e {
			return bad("the key must be printable ASCII")
		}
	}
	return v, nil
}

// budgetFields names each design's share of the fits, so the caller sees
// where to cut.
func budgetFields(st *models.Study) []Field {
	h := len(st.Hypotheses)
	var out []Field
	for i, d := range st.Designs {
		ds, err := d.Expand()
		if err != nil {
			ds = []models.Design{d}
		}
		fits := models.DesignsFits(ds, h)
		out = append(out, Field{
			Path:    "designs[" + itoa(i) + "].participants",
			Problem: fmt.Sprintf("this design needs %d fits (%d variant(s), participants × %d² hypotheses each)", fits, len(ds), h),
		})
	}
	return out
}

// fail answers a backend error, logging the ones that are ours.
func (s *Server) fail(w http.ResponseWriter, r *http.Request, err error) {
	e := fromBackend(err)
	switch {
	case e.Code == codeUnavailable:
		s.log.Warn("redis unreachable", "route", r.Pattern, "err", err)
	case e.Status >= 500:
		s.log.Error("backend", "route", r.Pattern, "err", err)
	}
	writeError(w, e)
}

func (s *Server) status(w http.ResponseWriter, r *http.Request) {
	st, err := s.cfg.Backend.Status(r.Context(), owner(r), r.PathValue("id"))
	if err != nil {
		s.fail(w, r, err)
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	writeJSON(w, http.StatusOK, toBody(st))
}

// List paging: the default and largest page sizes.
const (
	defaultPage = 20
	maxPage     = 100
)

// listBody is the JSON of GET /v1/studies.
type listBody struct {
	Studies    []statusBody `json:"studies"`
	NextCursor *string      `json:"next_cursor"`
}

func (s *Server) list(w http.ResponseWriter, r *http.Request) {
	q := r.URL.Query()
	limit := defaultPage
	var fields []Field
	if v := q.Get("limit"); v != "" {
		n, err := strconv.Atoi(v)
		if err != nil || n < 1 || n > maxPage {
			fields = append(fields, Field{Path: "limit", Problem: fmt.Sprintf("limit must be a whole number from 1 to %d, got %q", maxPage, v)})
		}
		limit = n
	}
	cursor := q.Get("cursor")
	if cursor != "" && !worker.ValidID(cursor) {
		fields = append(fields, Field{Path: "cursor", Problem: "cursor must be the next_cursor of a previous page"})
	}
	if len(fields) > 0 {
		writeError(w, newError(http.StatusBadRequest, codeInvalidQuery, "bad query parameters", fields...))
		return
	}
	page, next, err := s.cfg.Backend.List(r.Context(), owner(r), cursor, limit)
	if err != nil {
		s.fail(w, r, err)
		return
	}
	out := listBody{Studies: []statusBody{}}
	for _, st := range page {
		out.Studies = append(out.Studies, toBody(st))
	}
	if next != "" {
		out.NextCursor = &next
	}
	w.Header().Set("Cache-Control", "no-store")
	writeJSON(w, http.StatusOK, out)
}

func (s *Server) cancel(w http.ResponseWriter, r *http.Request) {
	st, err := s.cfg.Backend.Cancel(r.Context(), owner(r), r.PathValue("id"))
	if err != nil {
		s.fail(w, r, err)
		return
	}
	writeJSON(w, http.StatusOK, toBody(st))
}

// The media types of the report files.
const (
	mediaJSON = "application/json"
	mediaHTML = "text/html"
	mediaCSV  = "text/csv"
)

// report serves report.json or report.html by the Accept header.
func (s *Server) report(w http.ResponseWriter, r *http.Request) {
	w.Header().Add("Vary", "Accept")
	switch negotiate(r.Header.Get("Accept"), []string{mediaJSON, mediaHTML}) {
	case mediaJSON:
		s.serveReport(w, r, worker.ReportJSON)
	case mediaHTML:
		s.serveReport(w, r, worker.ReportHTML)
	default:
		writeError(w, newError(http.StatusNotAcceptable, codeNotAcceptable, "the report is available as application/json or text/html"))
	}
}

func (s *Server) reportHTML(w http.ResponseWriter, r *http.Request) {
	s.serveReport(w, r, worker.ReportHTML)
}

// file serves one of the tables (fits.csv, params.csv, measurement.csv)
// or its sidecar (fits.json, ...).
func (s *Server) file(k worker.ReportKind) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) { s.serveReport(w, r, k) }
}

func (s *Server) serveReport(w http.ResponseWriter, r *http.Request, k worker.ReportKind) {
	id := r.PathValue("id")
	b, err := s.cfg.Backend.Report(r.Context(), owner(r), id, k)
	if err != nil {
		if errors.Is(err, worker.ErrNotDone) {
			// Say where the study is, so the caller knows when to come back.
			if st, err := s.cfg.Backend.Status(r.Context(), owner(r), id); err == nil {
				writeError(w, newError(http.StatusConflict, codeNotFinished,
					fmt.Sprintf("the study is %s (%d of %d fits); the report is served once it is done", st.State, st.Done, st.Total)))
				return
			}
		}
		s.fail(w, r, err)
		return
	}
	switch k {
	case worker.ReportJSON, worker.FitsSidecar, worker.ParamsSidecar, worker.MeasurementSidecar:
		w.Header().Set("Content-Type", mediaJSON)
	case worker.ReportHTML:
		w.Header().Set("Content-Type", mediaHTML+"; charset=utf-8")
		// The report is self-contained: inline styles and SVG, no scripts.
		w.Header().Set("Content-Security-Policy", "default-src 'none'; style-src 'unsafe-inline'; img-src data:")
	case worker.FitsCSV, worker.ParamsCSV, worker.MeasurementCSV:
		w.Header().Set("Content-Type", mediaCSV+"; charset=utf-8")
		w.Header().Set("Content-Disposition", `attachment; filename="`+id+`-`+k.FileName()+`"`)
	}
	w.Header().Set("Content-Length", strconv.Itoa(len(b)))
	_, _ = w.Write(b) // the status is sent: a failed write means the client left, and there is no one to tell
}

func (s *Server) healthz(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, map[string]string{"status": "ok"})
}

// readyz answers 200 when Redis does, within 2 s.
func (s *Server) readyz(w http.ResponseWriter, r *http.Request) {
	ctx, cancel := context.WithTimeout(r.Context(), 2*time.Second)
	defer cancel()
	if err := s.cfg.Backend.Ping(ctx); err != nil {
		e := newError(http.StatusServiceUnavailable, codeNotReady, "redis is not reachable")
		e.RetryAfter = retryUnavailable
		writeError(w, e)
		return
	}
	writeJSON(w, http.StatusOK, map[string]string{"status": "ready"})
}

func (s *Server) serveOpenAPI(w http.ResponseWriter, r *http.Request) {
	w.Header().Set("Content-Type", "application/json")
	_, _ = w.Write(s.openapi) // the status is sent: a failed write means the client left
}
