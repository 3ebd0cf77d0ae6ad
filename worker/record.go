package worker

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// studyRecord is the decoded hash discrimen:{ID}:study (keys.go lists its
// fields). Every reader of the hash goes through decodeRecord, so a field
// that does not parse is reported once, by name, instead of reading as
// zero.
type studyRecord struct {
	Owner string
	Name  string
	// Kind is "" for a study and KindFit for a fit of collected data
	// (fits.go).
	Kind  string
	State State
	// Total counts the study's fits.
	Total int
	// Shards and ShardSize are 0 until the plan is stored.
	Shards, ShardSize int
	// Created is always set; Started, Finished and LastShard are zero until
	// they happen.
	Created, Started, Finished, LastShard time.Time
	// GridSeconds is the first compile's wall time, 0 until one finished.
	GridSeconds float64
	Error       string
	// Assemblies counts stored reports.
	Assemblies int
}

// fieldError is one field of a stored study record that is missing or does
// not parse.
type fieldError struct {
	Field string
	Value string
	// Err is the parse failure, or errMissingField.
	Err error
}

var errMissingField = errors.New("missing")

func (e *fieldError) Error() string {
	if errors.Is(e.Err, errMissingField) {
		return fmt.Sprintf("field %q is missing", e.Field)
	}
	return fmt.Sprintf("field %q = %q: %v", e.Field, e.Value, e.Err)
}

func (e *fieldError) Unwrap() error { return e.Err }

// recordError lists every bad field of one record, in the order of keys.go.
type recordError []*fieldError

func (e recordError) Error() string {
	parts := make([]string, len(e))
	for i, f := range e {
		parts[i] = f.Error()
	}
	return "worker: the study record does not decode: " + strings.Join(parts, "; ")
}

// decodeRecord decodes a study's hash as HGETALL returns it. The fields
// create writes (owner, name, status, created, total) are required; the
// others are absent until their step happens and then read as their zero
// value. Fields it does not know are ignored, so a newer writer's extra
// field does not break an older reader. Any bad field makes it return a
// recordError naming each bad field and its value.
func decodeRecord(m map[string]string) (studyRecord, error) {
	var r studyRecord
	var bad recordError
	get := func(field string, required bool) (string, bool) {
		v, ok := m[field]
		if !ok && required {
			bad = append(bad, &fieldError{Field: field, Err: errMissingField})
		}
		return v, ok
	}
	text := func(field string, required bool) string {
		v, _ := get(field, required) // absent reads as ""; get has noted a missing required field
		return v
	}
	check := func(field, v string, err error) {
		if err != nil {
			bad = append(bad, &fieldError{Field: field, Value: v, Err: err})
		}
	}
	count := func(field string, required bool, dst *int) {
		if v, ok := get(field, required); ok {
			n, err := parseCount(v)
			check(field, v, err)
			*dst = n
		}
	}
	instant := func(field string, required bool, dst *time.Time) {
		if v, ok := get(field, required); ok {
			t, err := parseUnixNano(v)
			check(field, v, err)
			*dst = t
		}
	}

	r.Owner = text("owner", true)
	r.Name = text("name", true)
	r.Kind = m["kind"]
	if v, ok := get("status", true); ok {
		s, err := parseState(v)
		check("status", v, err)
		r.State = s
	}
	instant("created", true, &r.Created)
	instant("started", false, &r.Started)
	instant("finished", false, &r.Finished)
	r.Error = text("error", false)
	count("total", true, &r.Total)
	count("shards", false, &r.Shards)
	count("shard_size", false, &r.ShardSize)
	if v, ok := get("grid_seconds", false); ok {
		f, err := strconv.ParseFloat(v, 64)
		if err == nil && (math.IsNaN(f) || math.IsInf(f, 0) || f < 0) {
			err = errors.New("not a finite number of seconds ≥ 0")
		}
		check("grid_seconds", v, err)
		r.GridSeconds = f
	}
	instant("last_shard", false, &r.LastShard)
	count("assemblies", false, &r.Assemblies)
	if len(bad) > 0 {
		return studyRecord{}, bad
	}
	return r, nil
}

// parseState reads a stored status.
func parseState(v string) (State, error) {
	for _, s := range States {
		if string(s) == v {
			return s, nil
		}
	}
	return "", fmt.Errorf("not a state (want one of %v)", States)
}

// parseCount reads a stored count: a whole number ≥ 0.
func parseCount(v string) (int, error) {
	n, err := strconv.Atoi(v)
	if err != nil {
		return 0, fmt.Errorf("not a whole number: %w", err)
	}
	if n < 0 {
		return 0, errors.New("a count cannot be negative")
	}
	return n, nil
}

// parseUnixNano reads a stored instant, Unix nanoseconds, as UTC.
func parseUnixNano(v string) (time.Time, error) {
	n, err := strconv.ParseInt(v, 10, 64)
	if err != nil {
		return time.Time{}, fmt.Errorf("not Unix nanoseconds: %w", err)
	}
	return time.Unix(0, n).UTC(), nil
}
