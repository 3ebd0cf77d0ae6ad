package api

import (
	"bytes"
	"context"
	"encoding/json"
	"mime"
	"net"
	"net/http/httptest"
	"regexp"
	"sort"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/santhosh-tekuri/jsonschema/v6"

	"discrimen/models"
	"discrimen/worker"
)

// errBackend answers every call with err.
type errBackend struct{ err error }

func (b *errBackend) SubmitOnce(context.Context, string, string, []byte, *models.Study, int64, func(context.Context) error) (worker.Status, bool, error) {
	return worker.Status{}, false, b.err
}
func (b *errBackend) Usage(context.Context, string) (worker.Usage, error) {
	return worker.Usage{}, b.err
}
func (b *errBackend) Status(context.Context, string, string) (worker.Status, error) {
	return worker.Status{}, b.err
}
func (b *errBackend) List(context.Context, string, string, int) ([]worker.Status, string, error) {
	return nil, "", b.err
}
func (b *errBackend) Cancel(context.Context, string, string) (worker.Status, error) {
	return worker.Status{}, b.err
}
func (b *errBackend) Report(context.Context, string, string, worker.ReportKind) ([]byte, error) {
	return nil, b.err
}
func (b *errBackend) Ping(context.Context) error { return b.err }

// openAPI is the served document, parsed, with the means to validate a
// response against it.
type openAPI struct {
	t        testing.TB
	doc      map[string]any
	compiler *jsonschema.Compiler
	schemas  map[string]*jsonschema.Schema
	// seen records every (operation, status) a test produced.
	seen map[string]bool
}

const openAPIURL = "urn:discrimen:openapi.json"

func loadOpenAPI(t testing.TB, body []byte) *openAPI {
	t.Helper()
	var doc map[string]any
	if err := json.Unmarshal(body, &doc); err != nil {
		t.Fatalf("openapi.json: %v", err)
	}
	inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	c := jsonschema.NewCompiler()
	c.AssertFormat()
	if err := c.AddResource(openAPIURL, inst); err != nil {
		t.Fatal(err)
	}
	return &openAPI{t: t, doc: doc, compiler: c, schemas: map[string]*jsonschema.Schema{}, seen: map[string]bool{}}
}

func obj(v any) map[string]any { m, _ := v.(map[string]any); return m }

// pointerEscape escapes a JSON pointer token (RFC 6901).
func pointerEscape(s string) string {
	return strings.ReplaceAll(strings.ReplaceAll(s, "~", "~0"), "/", "~1")
}

// resolve follows a local $ref of a response object.
func (o *openAPI) resolve(v map[string]any, ptr string) (map[string]any, string) {
	ref, ok := v["$ref"].(string)
	if !ok {
		return v, ptr
	}
	cur := any(o.doc)
	for _, tok := range strings.Split(strings.TrimPrefix(ref, "#/"), "/") {
		cur = obj(cur)[strings.ReplaceAll(strings.ReplaceAll(tok, "~1", "/"), "~0", "~")]
	}
	return obj(cur), strings.TrimPrefix(ref, "#")
}

// operation finds the documented operation of a request path.
func (o *openAPI) operation(method, path string) (template string, op map[string]any) {
	path, _, _ = strings.Cut(path, "?")
	for tmpl, item := range obj(o.doc["paths"]) {
		re := "^" + regexp.MustCompile(`\\\{[a-z]+\\\}`).ReplaceAllString(regexp.QuoteMeta(tmpl), `[^/]+`) + "$"
		if regexp.MustCompile(re).MatchString(path) {
			if op := obj(obj(item)[strings.ToLower(method)]); op != nil {
				return tmpl, op
			}
		}
	}
	return "", nil
}

// check validates one exchange against the document: the status code is
// documented explicitly for the operation, the content type is one the
// response lists, and a JSON body matches the schema.
func (o *openAPI) check(method, path string, p reply) {
	t := o.t
	t.Helper()
	tmpl, op := o.operation(method, path)
	if op == nil {
		t.Fatalf("%s %s is not in openapi.json", method, path)
	}
	code := itoa(p.code)
	o.seen[op["operationId"].(string)+" "+code] = true
	ptr := "/paths/" + pointerEscape(tmpl) + "/" + strings.ToLower(method) + "/responses/" + code
	resp := obj(obj(op["responses"])[code])
	if resp == nil {
		t.Fatalf("%s %s answered %d, which openapi.json does not document for %s", method, path, p.code, op["operationId"])
	}
	resp, ptr = o.resolve(resp, ptr)
	mt, _, err := mime.ParseMediaType(p.header.Get("Content-Type"))
	if err != nil && p.header.Get("Content-Type") != "" {
		t.Fatalf("%s %s %d: Content-Type %q: %v", method, path, p.code, p.header.Get("Content-Type"), err)
	}
	media := obj(obj(resp["content"])[mt])
	if media == nil {
		t.Fatalf("%s %s %d: content type %q is not documented", method, path, p.code, mt)
	}
	if mt != "application/json" {
		return
	}
	loc := openAPIURL + "#" + ptr + "/content/" + pointerEscape(mt) + "/schema"
	sch := o.schemas[loc]
	if sch == nil {
		var err error
		if sch, err = o.compiler.Compile(loc); err != nil {
			t.Fatalf("compiling %s: %v", loc, err)
		}
		o.schemas[loc] = sch
	}
	inst, err := jsonschema.UnmarshalJSON(bytes.NewReader(p.body))
	if err != nil {
		t.Fatalf("%s %s %d: body is not JSON: %v", method, path, p.code, err)
	}
	if err := sch.Validate(inst); err != nil {
		t.Fatalf("%s %s %d: body does not match openapi.json:\n%v\nbody: %.500s", method, path, p.code, err, p.body)
	}
}

// TestOpenAPIRoutes: every route is documented with its method and
// security, and every documented operation is routed.
func TestOpenAPIRoutes(t *testing.T) {
	r := newRig(t, nil)
	p := r.do("GET", "/v1/openapi.json", "", nil)
	o := loadOpenAPI(t, p.body)
	if o.doc["openapi"] != "3.1.0" {
		t.Fatalf("openapi = %v, want 3.1.0", o.doc["openapi"])
	}
	routed := map[string]bool{}
	for _, rt := range r.api.routes() {
		key := strings.ToLower(rt.method) + " " + rt.pattern
		routed[key] = true
		item := obj(obj(o.doc["paths"])[rt.pattern])
		op := obj(item[strings.ToLower(rt.method)])
		if op == nil {
			t.Errorf("route %s %s is not in openapi.json", rt.method, rt.pattern)
			continue
		}
		sec, explicit := op["security"].([]any)
		public := explicit && len(sec) == 0
		if public == rt.auth {
			t.Errorf("%s %s: route auth %v, documented security %v", rt.method, rt.pattern, rt.auth, op["security"])
		}
		// Path parameters are declared where the pattern has them.
		params := append(append([]any{}, anySlice(item["parameters"])...), anySlice(op["parameters"])...)
		for _, name := range regexp.MustCompile(`\{([a-z]+)\}`).FindAllStringSubmatch(rt.pattern, -1) {
			found := false
			for _, prm := range params {
				pm, _ := o.resolve(obj(prm), "")
				if pm["in"] == "path" && pm["name"] == name[1] {
					found = true
				}
			}
			if !found {
				t.Errorf("%s %s: path parameter %s is not declared", rt.method, rt.pattern, name[1])
			}
		}
	}
	for path, item := range obj(o.doc["paths"]) {
		for method := range obj(item) {
			if method == "parameters" {
				continue
			}
			if !routed[method+" "+path] {
				t.Errorf("openapi.json documents %s %s, which is not routed", strings.ToUpper(method), path)
			}
		}
	}
	// The served Study schema is the validator's: put its Study_NAME
	// components back under $defs, point the references back at them, and
	// it equals models.StudySchema() without $id and $schema.
	schemas := obj(obj(o.doc["components"])["schemas"])
	served := map[string]any{}
	for k, v := range obj(schemas["Study"]) {
		served[k] = v
	}
	defs := map[string]any{}
	for name, v := range schemas {
		if def, ok := strings.CutPrefix(name, studyDefPrefix); ok {
			defs[def] = v
		}
	}
	served["$defs"] = defs
	back, _ := json.Marshal(served)
	back = bytes.ReplaceAll(back, []byte(`"#/components/schemas/`+studyDefPrefix), []byte(`"#/$defs/`))
	var got, want map[string]any
	if err := json.Unmarshal(back, &got); err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(models.StudySchema(), &want); err != nil {
		t.Fatal(err)
	}
	delete(want, "$id")
	delete(want, "$schema")
	g, _ := json.Marshal(got)
	w, _ := json.Marshal(want)
	if !bytes.Equal(g, w) {
		t.Fatalf("components.schemas.Study (with its Study_* definitions) is not the study file schema")
	}
}

func anySlice(v any) []any { s, _ := v.([]any); return s }

// TestOpenAPIResponses drives every documented response of every operation
// and checks each answer against the document; the document may claim
// nothing the test does not produce.
func TestOpenAPIResponses(t *testing.T) {
	r := newRig(t, func(c *Config) { c.MaxBodyBytes = 4 << 10; c.MaxFits = 1000 }, "harbour", "pilot", "limited")
	o := loadOpenAPI(t, r.do("GET", "/v1/openapi.json", "", nil).body)
	key := r.keys["harbour"]
	ex := func(method, path, key string, body []byte, headers ...string) reply {
		t.Helper()
		p := r.do(method, path, key, body, headers...)
		o.check(method, path, p)
		return p
	}
	ex("GET", "/v1/openapi.json", "", nil)
	ex("GET", "/healthz", "", nil)
	ex("GET", "/readyz", "", nil)
	ex("GET", "/metrics", "", nil)

	done := r.submit("harbour", tinyStudy)
	running := ex("POST", "/v1/studies", key, []byte(slowStudy))
	var sub submitBody
	if err := json.Unmarshal(running.body, &sub); err != nil {
		t.Fatalf("submit body: %v", err)
	}
	ex("POST", "/v1/studies", key, []byte(`{"designs": 3}`))
	ex("POST", "/v1/studies", "", []byte(tinyStudy))
	ex("POST", "/v1/studies", key, bytes.Repeat([]byte(" "), 5<<10))
	ex("POST", "/v1/studies", key, []byte(tinyStudy), "Content-Type", "application/xml")
	ex("POST", "/v1/studies", key, []byte(strings.Replace(tinyStudy, `"participants": 8`, `"participants": 300`, 1)))

	ex("GET", "/v1/studies", key, nil)
	ex("GET", "/v1/studies?limit=1", key, nil)
	ex("GET", "/v1/studies?limit=0", key, nil)
	ex("GET", "/v1/studies", "", nil)

	missing := "/v1/studies/0123456789abcdef0123456789ab"
	for _, suffix := range []string{"", "/report", "/report.html", "/fits.csv", "/fits.json", "/params.csv", "/params.json", "/measurement.csv", "/measurement.json"} {
		ex("GET", sub.StatusURL+suffix, "", nil)
		ex("GET", missing+suffix, key, nil)
		if suffix != "" {
			ex("GET", sub.StatusURL+suffix, key, nil) // 409: still running
		}
	}
	ex("GET", sub.StatusURL, key, nil)
	ex("GET", sub.StatusURL+"/report", key, nil, "Accept", "text/csv")

	r.wait("harbour", done, time.Minute, final)
	ex("GET", "/v1/studies/"+done+"/report", key, nil)
	ex("GET", "/v1/studies/"+done+"/report", key, nil, "Accept", "text/html")
	ex("GET", "/v1/studies/"+done+"/report.html", key, nil)
	for _, name := range []string{"fits.csv", "fits.json", "params.csv", "params.json", "measurement.csv", "measurement.json"} {
		ex("GET", "/v1/studies/"+done+"/"+name, key, nil)
	}
	ex("GET", "/v1/studies/"+done, key, nil)

	ex("DELETE", sub.StatusURL, "", nil)
	ex("DELETE", missing, key, nil)
	ex("DELETE", sub.StatusURL, key, nil)
	ex("DELETE", "/v1/studies/"+done, key, nil)

	// A retry under an Idempotency-Key: 200 with the first study.
	retry := strings.Replace(tinyStudy, `"seed": 11`, `"seed": 13`, 1)
	if p := r.do("POST", "/v1/studies", key, []byte(retry), "Idempotency-Key", `"watch-13"`); p.code != 202 {
		t.Fatalf("first keyed submit: %d %s", p.code, p.body)
	}
	ex("POST", "/v1/studies", key, []byte(retry), "Idempotency-Key", `"watch-13"`)

	// 429 everywhere: the "limited" key spends its burst first.
	limited := r.keys["limited"]
	r.api.limits = newLimiters(0.001, 1)
	r.do("GET", "/v1/studies", limited, nil)
	ex("POST", "/v1/studies", limited, []byte(tinyStudy))
	ex("GET", "/v1/studies", limited, nil)
	ex("DELETE", sub.StatusURL, limited, nil)
	for _, suffix := range []string{"", "/report", "/report.html", "/fits.csv", "/fits.json", "/params.csv", "/params.json", "/measurement.csv", "/measurement.json"} {
		ex("GET", sub.StatusURL+suffix, limited, nil)
	}

	// 503 from /readyz needs a Redis that is gone.
	dead, err := New(Config{Backend: &deadBackend{}, NoAuth: true})
	if err != nil {
		t.Fatal(err)
	}
	rec := httptest.NewRecorder()
	dead.ServeHTTP(rec, mustRequest(t, "GET", "/readyz"))
	o.check("GET", "/readyz", reply{code: rec.Code, header: rec.Header(), body: rec.Body.Bytes()})

	// 503 from every route that reads Redis, and 409 from a keyed retry
	// while the first request runs, from a backend that answers only that.
	for _, be := range []*errBackend{{err: &net.OpError{Op: "dial", Net: "tcp", Err: syscall.ECONNREFUSED}}, {err: worker.ErrKeyInFlight}} {
		a, err := New(Config{Backend: be, NoAuth: true})
		if err != nil {
			t.Fatal(err)
		}
		send := func(method, path string, body []byte) {
			t.Helper()
			req := mustRequest(t, method, path)
			if body != nil {
				req = httptest.NewRequest(method, path, bytes.NewReader(body))
			}
			rec := httptest.NewRecorder()
			a.ServeHTTP(rec, req)
			o.check(method, path, reply{code: rec.Code, header: rec.Header(), body: rec.Body.Bytes()})
		}
		send("POST", "/v1/studies", []byte(tinyStudy))
		if be.err == worker.ErrKeyInFlight {
			continue
		}
		send("GET", "/v1/studies", nil)
		send("DELETE", sub.StatusURL, nil)
		for _, suffix := range []string{"", "/report", "/report.html", "/fits.csv", "/fits.json", "/params.csv", "/params.json", "/measurement.csv", "/measurement.json"} {
			send("GET", sub.StatusURL+suffix, nil)
		}
	}

	var missed []string
	for path, item := range obj(o.doc["paths"]) {
		for method, v := range obj(item) {
			if method == "parameters" {
				continue
			}
			op := obj(v)
			for code := range obj(op["responses"]) {
				if code == "default" {
					continue
				}
				if !o.seen[op["operationId"].(string)+" "+code] {
					missed = append(missed, strings.ToUpper(method)+" "+path+" "+code)
				}
			}
		}
	}
	sort.Strings(missed)
	if len(missed) > 0 {
		t.Fatalf("documented responses no test produced:\n%s", strings.Join(missed, "\n"))
	}
}

// TestOpenAPIRefsResolve: every $ref of the served document is a local
// JSON pointer that resolves inside it, the study schema carries no $id or
// $schema of its own (a nested $id moves the base of its references, which
// OpenAPI tools need not follow), and its $defs are components.
func TestOpenAPIRefsResolve(t *testing.T) {
	body, err := OpenAPIDocument()
	if err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(body, &doc); err != nil {
		t.Fatal(err)
	}
	study := obj(obj(obj(doc["components"])["schemas"])["Study"])
	for _, kw := range []string{"$id", "$schema", "$defs"} {
		if _, ok := study[kw]; ok {
			t.Errorf("components.schemas.Study keeps %s", kw)
		}
	}
	var refs []string
	var walk func(v any)
	walk = func(v any) {
		switch x := v.(type) {
		case map[string]any:
			if ref, ok := x["$ref"].(string); ok {
				refs = append(refs, ref)
			}
			for _, e := range x {
				walk(e)
			}
		case []any:
			for _, e := range x {
				walk(e)
			}
		}
	}
	walk(doc)
	studyRefs := 0
	for _, ref := range refs {
		if !strings.HasPrefix(ref, "#/") {
			t.Errorf("$ref %q is not a local pointer", ref)
			continue
		}
		cur := any(doc)
		for _, tok := range strings.Split(strings.TrimPrefix(ref, "#/"), "/") {
			cur = obj(cur)[strings.ReplaceAll(strings.ReplaceAll(tok, "~1", "/"), "~0", "~")]
		}
		if cur == nil {
			t.Errorf("$ref %q does not resolve", ref)
		}
		if strings.HasPrefix(ref, "#/components/schemas/"+studyDefPrefix) {
			studyRefs++
		}
	}
	// The study schema has 40 references to its $defs today; fewer than
	// 20 would mean they were dropped rather than rewritten.
	if studyRefs < 20 {
		t.Errorf("%d references into the study schema's definitions, want at least 20", studyRefs)
	}
}
