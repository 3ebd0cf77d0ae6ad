// Package api is the HTTP face of the service: the v1 endpoints on
// net/http, request validation messages (the study validator's field
// paths), bearer-key auth, per-key rate limits, body, compute and report
// caps, per-key quotas of studies, fits and stored bytes, Idempotency-Key
// on submit, a deadline on every request, status and report endpoints with
// content negotiation, and the OpenAPI 3.1 document (openapi.json, served
// at /v1/openapi.json). It knows nothing of how a fit is done: it calls a
// Backend, which *worker.Client implements, and maps the Backend's errors
// to HTTP codes in one place (fromBackend in errors.go), a Redis that
// cannot be reached to 503 with Retry-After.
package api
