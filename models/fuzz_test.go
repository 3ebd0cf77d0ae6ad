package models

import (
	"bytes"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"testing"
	"unicode/utf8"

	"github.com/google/go-cmp/cmp"
	"github.com/google/go-cmp/cmp/cmpopts"
)

// FuzzDecodeStudy feeds arbitrary bytes to the study file readers. Whatever
// the input: nothing panics, a rejection is a *ValidationError whose
// problems all have text, and an accepted study validates clean, has no
// schema problems, expands, and survives a round trip through JSON.
func FuzzDecodeStudy(f *testing.F) {
	files, _ := filepath.Glob("../testdata/studies/*.json")
	more, _ := filepath.Glob("../testdata/studies/invalid/*.json")
	for _, name := range append(files, more...) {
		f.Add(readFileF(f, name))
	}
	f.Add([]byte(`{"designs":[{}],"hypotheses":[{"family":"constant","params":{"level":{"value":1}}},{"family":"linear","params":{"slope":{"value":1}}}],"replication":{"group_sizes":[10]}}`))
	f.Add([]byte(`{"designs":[{"vary":[{"field":"streams","values":[2,4],"labels":["two","four"]}]}],"hypotheses":[{"family":"hazard","params":{"weber":{"min":0.1,"max":0.4}}},{"family":"logistic","params":{"midpoint":{"value":0.5},"width":{"value":0.1}}}]}`))
	f.Add([]byte(`[]`))
	f.Add([]byte(`{"designs":[{"cti_ms":[3e2]}]}`))

	f.Fuzz(func(t *testing.T, data []byte) {
		schemaProbs := ValidateSchema(data)
		for _, p := range schemaProbs {
			if p.Problem == "" {
				t.Fatalf("schema problem at %q has no text", p.Path)
			}
		}
		if s, err := DecodeStudy(data); err == nil {
			_ = s.Validate() // must not panic on anything that decodes
			_, _ = s.ExpandedDesigns()
			_ = s.TotalFits()
		}
		s, err := LoadStudy(data)
		if err != nil {
			var ve *ValidationError
			if !errors.As(err, &ve) || len(ve.Problems) == 0 {
				t.Fatalf("LoadStudy error %v (%T) is not a non-empty *ValidationError", err, err)
			}
			for _, p := range ve.Problems {
				if p.Problem == "" || !utf8.ValidString(p.Problem) || !utf8.ValidString(p.Path) {
					t.Fatalf("problem %q at %q is empty or not UTF-8", p.Problem, p.Path)
				}
			}
			return
		}
		if len(schemaProbs) != 0 {
			t.Fatalf("LoadStudy accepted a study with schema problems %v", schemaProbs)
		}
		if p := s.Validate(); len(p) != 0 {
			t.Fatalf("LoadStudy accepted a study Validate rejects: %v", p)
		}
		designs, err := s.ExpandedDesigns()
		if err != nil {
			t.Fatalf("accepted study does not expand: %v", err)
		}
		for _, d := range designs {
			if p := designProblems(&d); len(p) != 0 {
				t.Fatalf("variant %s of an accepted study is invalid: %v", d.Name, p)
			}
		}
		if s.TotalFits() > MaxFits {
			t.Fatalf("accepted study needs %d fits", s.TotalFits())
		}
		// FillDefaults is idempotent and the filled study encodes to itself.
		enc, err := json.Marshal(s)
		if err != nil {
			t.Fatal(err)
		}
		back, err := DecodeStudy(enc)
		if err != nil {
			t.Fatalf("re-decoding %s: %v", enc, err)
		}
		compact := cmp.Transformer("compact", func(r json.RawMessage) string {
			var b bytes.Buffer
			if json.Compact(&b, r) != nil {
				return string(r)
			}
			return b.String()
		})
		// (the unexported record of which fields took defaults differs:
		// the re-encoded file gives them all)
		if d := cmp.Diff(s, back, compact, cmpopts.IgnoreUnexported(Design{}, Replication{})); d != "" {
			t.Fatalf("round trip changed the study (-first +second):\n%s", d)
		}
	})
}

func readFileF(f *testing.F, path string) []byte {
	f.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		f.Fatal(err)
	}
	return data
}
