package worker

import (
	"context"
	"errors"
	"maps"
	"strings"
	"testing"
	"time"

	"github.com/google/go-cmp/cmp"
)

// submitted is a record as create writes it.
var submitted = map[string]string{
	"owner": "harbour", "name": "berth-watch", "status": "queued",
	"created": "1767225600000000000", "total": "32",
}

func with(m map[string]string, kv ...string) map[string]string {
	out := maps.Clone(m)
	for i := 0; i < len(kv); i += 2 {
		out[kv[i]] = kv[i+1]
	}
	return out
}

func without(m map[string]string, field string) map[string]string {
	out := maps.Clone(m)
	delete(out, field)
	return out
}

// TestDecodeRecord: a record as the service writes it at each step decodes
// to the typed record; a missing required field or a field that does not
// parse is an error naming every bad field with its value.
func TestDecodeRecord(t *testing.T) {
	created := time.Unix(0, 1767225600000000000).UTC()
	queued := studyRecord{Owner: "harbour", Name: "berth-watch", State: Queued, Created: created, Total: 32}
	done := queued
	done.State = Done
	done.Started = created.Add(1500 * time.Millisecond)
	done.Finished = created.Add(9 * time.Second)
	done.LastShard = created.Add(8 * time.Second)
	done.Shards, done.ShardSize, done.GridSeconds, done.Assemblies = 6, 3, 0.731, 1
	failed := queued
	failed.State, failed.Error, failed.Finished = Failed, "the study no longer loads: designs: missing", created.Add(time.Second)

	type bad struct{ field, value string }
	for _, tc := range []struct {
		name string
		in   map[string]string
		want studyRecord
		bad  []bad // nil: decodes
	}{
		{name: "as submitted", in: submitted, want: queued},
		{name: "done, every field the previous code wrote", in: with(submitted,
			"status", "done", "started", "1767225601500000000", "finished", "1767225609000000000",
			"last_shard", "1767225608000000000", "shards", "6", "shard_size", "3",
			"grid_seconds", "0.731", "assemblies", "1"), want: done},
		{name: "failed with a message", in: with(submitted, "status", "failed",
			"error", "the study no longer loads: designs: missing", "finished", "1767225601000000000"), want: failed},
		{name: "an unknown field is ignored", in: with(submitted, "colour", "teal"), want: queued},
		{name: "grid_seconds in exponent form", in: with(submitted, "grid_seconds", "5e-05"),
			want: func() studyRecord { r := queued; r.GridSeconds = 5e-05; return r }()},
		{name: "corrupt total", in: with(submitted, "total", "3x2"), bad: []bad{{"total", "3x2"}}},
		{name: "negative shards", in: with(submitted, "shards", "-1"), bad: []bad{{"shards", "-1"}}},
		{name: "unknown status", in: with(submitted, "status", "runing"), bad: []bad{{"status", "runing"}}},
		{name: "created not in nanoseconds", in: with(submitted, "created", "2026-01-01T00:00:00Z"),
			bad: []bad{{"created", "2026-01-01T00:00:00Z"}}},
		{name: "empty started", in: with(submitted, "started", ""), bad: []bad{{"started", ""}}},
		{name: "grid_seconds NaN", in: with(submitted, "grid_seconds", "NaN"), bad: []bad{{"grid_seconds", "NaN"}}},
		{name: "missing status", in: without(submitted, "status"), bad: []bad{{"status", ""}}},
		{name: "missing owner", in: without(submitted, "owner"), bad: []bad{{"owner", ""}}},
		{name: "two bad fields, in keys.go order", in: with(submitted, "assemblies", "one", "finished", "soon"),
			bad: []bad{{"finished", "soon"}, {"assemblies", "one"}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			for range 2 { // decoding is a pure function: the same answer twice
				got, err := decodeRecord(tc.in)
				if tc.bad == nil {
					if err != nil {
						t.Fatal(err)
					}
					if d := cmp.Diff(tc.want, got); d != "" {
						t.Fatalf("decoded record (-want +got):\n%s", d)
					}
					continue
				}
				var re recordError
				if !errors.As(err, &re) {
					t.Fatalf("decodeRecord: %v, want a recordError", err)
				}
				var gotBad []bad
				for _, f := range re {
					gotBad = append(gotBad, bad{f.Field, f.Value})
					if !strings.Contains(err.Error(), `"`+f.Field+`"`) {
						t.Errorf("error %q does not name the field %q", err, f.Field)
					}
					if f.Value != "" && !strings.Contains(err.Error(), `"`+f.Value+`"`) {
						t.Errorf("error %q does not quote the value %q", err, f.Value)
					}
				}
				if d := cmp.Diff(tc.bad, gotBad, cmp.AllowUnexported(bad{})); d != "" {
					t.Fatalf("bad fields (-want +got):\n%s", d)
				}
				if got != (studyRecord{}) {
					t.Fatalf("a record that does not decode came back as %+v", got)
				}
			}
		})
	}
}

// TestCorruptRecordIsReported: a stored field that does not parse reaches
// the caller as an error naming the study, the field and the value, where
// it used to read as zero.
func TestCorruptRecordIsReported(t *testing.T) {
	r := newRig(t, nil)
	ctx := context.Background()
	st := r.submit(t, "harbour", tinyStudy)
	rdb := r.redis.Client(t)
	if err := rdb.HSet(ctx, studyKey(st.ID), "total", "thirty-two").Err(); err != nil {
		t.Fatal(err)
	}
	_, err := r.client.Status(ctx, "harbour", st.ID)
	if err == nil {
		t.Fatal("a corrupt total read without an error")
	}
	for _, want := range []string{st.ID, `"total"`, `"thirty-two"`} {
		if !strings.Contains(err.Error(), want) {
			t.Errorf("error %q does not mention %s", err, want)
		}
	}
	if errors.Is(err, ErrNotFound) {
		t.Errorf("a corrupt record reads as not found: %v", err)
	}
	// A shard count that does not parse is named with its key and field.
	if err := rdb.HSet(ctx, studyKey(st.ID), "total", "32").Err(); err != nil {
		t.Fatal(err)
	}
	if err := rdb.HSet(ctx, doneKey(st.ID), "3", "six").Err(); err != nil {
		t.Fatal(err)
	}
	_, err = r.client.Status(ctx, "harbour", st.ID)
	if err == nil || !strings.Contains(err.Error(), doneKey(st.ID)+" field 3") || !strings.Contains(err.Error(), `"six"`) {
		t.Fatalf("corrupt done entry: %v, want the key, field and value named", err)
	}
}
