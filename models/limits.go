package models

// The size caps of a study file, checked on the parsed JSON before the
// schema, the decoder or any vary expansion sees it, so that the work done
// on a file is linear in its length: a 60 KB file of 20,000 vary values is
// refused with one problem instead of being expanded into 20,000 designs.

import (
	"fmt"
	"strconv"
	"unicode/utf8"
)

// The caps. Each is far above what a study plausibly needs (the demo
// studies use at most 6 values per vary block and 12 variants) and low
// enough that decoding, validating and expanding a file at every cap at
// once stays well under a second.
const (
	// MaxVaryValues caps the values of one vary block.
	MaxVaryValues = 100
	// MaxVariants caps the designs of a study with its vary blocks
	// expanded: Σ over designs of the values of its vary blocks, a design
	// without vary blocks counting 1.
	MaxVariants = 256
	// MaxNameLength caps every string of the file, in characters: study,
	// design and hypothesis names, vary labels and the enumerated words
	// (family, dist, field, measures, objective).
	MaxNameLength = 100
	// MaxVariantNameLength caps a variant's name, "<design>/<label>" or
	// "<design>/<field>=<value>": a design name and a label at their caps.
	// A variant named after a long value (a cti_ms list of hundreds of
	// CTIs) needs labels.
	MaxVariantNameLength = 2*MaxNameLength + 1
	// MaxArrayEntries caps every array not capped above or by the schema
	// (cti_ms, cti_weights, group_sizes, labels, ...).
	MaxArrayEntries = 1000
	// MaxObjectMembers caps the members of every object (a design has 19
	// fields; a hypothesis's params at most a handful).
	MaxObjectMembers = 64
	// MaxDepth caps the nesting of arrays and objects; the deepest a
	// study file goes is 7 (designs[0].vary[0].values[0][0]).
	MaxDepth = 12
	// MaxProblems caps the problems a ValidationError lists; the rest are
	// counted in one closing problem.
	MaxProblems = 200
)

// limitWalk checks the caps on a parsed file, collecting one problem per
// value over a cap. Paths are kept as tokens and rendered only for a
// problem, so the walk costs O(size of the file).
type limitWalk struct {
	tokens  []string
	isIndex []bool
	out     []Problem
}

func (w *limitWalk) path() string {
	return location{tokens: w.tokens, isIndex: w.isIndex}.path()
}

func (w *limitWalk) push(t string, index bool) {
	w.tokens = append(w.tokens, t)
	w.isIndex = append(w.isIndex, index)
}

func (w *limitWalk) pop() {
	w.tokens = w.tokens[:len(w.tokens)-1]
	w.isIndex = w.isIndex[:len(w.isIndex)-1]
}

func (w *limitWalk) add(format string, args ...any) {
	w.out = append(w.out, Problem{Path: w.path(), Problem: fmt.Sprintf(format, args...)})
}

// limitProblems returns the problems of a parsed study file (as decoded by
// jsonschema.UnmarshalJSON: objects, arrays, strings, json.Number, bool,
// nil) over the caps above, in file order; nil when it is within them.
func limitProblems(inst any) []Problem {
	w := &limitWalk{}
	w.walk(inst, 1)
	if len(w.out) > 0 {
		return w.out
	}
	if n, ok := countVariants(inst); ok && n > MaxVariants {
		return []Problem{{Path: "designs", Problem: fmt.Sprintf(
			"the designs expand to %d variants (each vary value makes one; a design without vary blocks is one); the cap is %d variants per study", n, MaxVariants)}}
	}
	return nil
}

func (w *limitWalk) walk(v any, depth int) {
	switch x := v.(type) {
	case map[string]any:
		if depth > MaxDepth {
			w.add("the file nests %d levels deep here; the cap is %d levels", depth, MaxDepth)
			return
		}
		if len(x) > MaxObjectMembers {
			w.add("an object may have at most %d members, got %d", MaxObjectMembers, len(x))
			return
		}
		for k, e := range x {
			if n := utf8.RuneCountInString(k); n > MaxNameLength {
				w.add("a member name may be at most %d characters, got one of %d", MaxNameLength, n)
				continue
			}
			w.push(k, false)
			w.walk(e, depth+1)
			w.pop()
		}
	case []any:
		if depth > MaxDepth {
			w.add("the file nests %d levels deep here; the cap is %d levels", depth, MaxDepth)
			return
		}
		limit, what := MaxArrayEntries, "an array"
		if w.isVaryValues() {
			limit, what = MaxVaryValues, "a vary block"
		}
		if len(x) > limit {
			w.add("%s may have at most %d values, got %d", what, limit, len(x))
			return
		}
		for i, e := range x {
			w.push(strconv.Itoa(i), true)
			w.walk(e, depth+1)
			w.pop()
		}
	case string:
		if n := utf8.RuneCountInString(x); n > MaxNameLength {
			w.add("a string may be at most %d characters, got %d", MaxNameLength, n)
		}
	}
}

// isVaryValues reports whether the walk is at designs[i].vary[k].values.
func (w *limitWalk) isVaryValues() bool {
	t, ix := w.tokens, w.isIndex
	return len(t) == 5 && t[0] == "designs" && ix[1] && t[2] == "vary" && ix[3] && t[4] == "values"
}

// countVariants counts the expanded designs of a parsed file; ok is false
// when designs is not an array (the schema reports that).
func countVariants(inst any) (n int, ok bool) {
	root, _ := inst.(map[string]any)
	designs, ok := root["designs"].([]any)
	if !ok {
		return 0, false
	}
	for _, d := range designs {
		obj, _ := d.(map[string]any)
		vary, _ := obj["vary"].([]any)
		if len(vary) == 0 {
			n++
			continue
		}
		for _, b := range vary {
			blk, _ := b.(map[string]any)
			vals, _ := blk["values"].([]any)
			n += len(vals)
		}
	}
	return n, true
}

// capProblems keeps the first MaxProblems problems and counts the rest in
// one closing problem, so an error stays a readable size.
func capProblems(ps []Problem) []Problem {
	if len(ps) <= MaxProblems {
		return ps
	}
	rest := len(ps) - MaxProblems
	out := append(ps[:MaxProblems:MaxProblems], Problem{Path: "", Problem: fmt.Sprintf(
		"%d more problems are not listed (at most %d are); fix these and check again", rest, MaxProblems)})
	return out
}

// truncateRunes returns s cut to its first n characters.
func truncateRunes(s string, n int) string {
	for i := range s {
		if n == 0 {
			return s[:i]
		}
		n--
	}
	return s
}
