package worker

import (
	"bytes"
	"context"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"discrimen/recovery"
)

// dropTiming removes fit.json's timing, the one part that differs between
// the queue and `discrimen fit`.
func dropTiming(t *testing.T, b []byte) []byte {
	t.Helper()
	var m map[string]json.RawMessage
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	delete(m, "timing")
	out, err := json.Marshal(m)
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// TestFitJobMatchesInProcess: exported synthetic participants, fitted on
// the queue in blocks of 2, give fit.json's bytes of the in-process fit
// (timing apart); another owner gets ErrNotFound; DeleteFit leaves no key
// of the fit in Redis.
func TestFitJobMatchesInProcess(t *testing.T) {
	r := newRig(t, func(c *Config) { c.ShardFits = 4 }) // 2 hypotheses → 2 participants per block
	srv := r.server(t, nil)
	defer srv.Shutdown()
	study := load(t, tinyStudy)
	files, err := recovery.Export(study, "two-channels", "steady-lamp", 5)
	if err != nil {
		t.Fatal(err)
	}
	var trials []byte
	for _, f := range files {
		if f.Name == "trials.csv" {
			trials = f.Data
		}
	}
	up := FitUpload{Study: []byte(tinyStudy), Design: "two-channels", Trials: recovery.DataFile{Name: "trials.csv", Data: trials}}
	s, data, err := ParseFit(up)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	st, replayed, err := r.client.SubmitFit(ctx, "harbour", "k1", up, s, data, 0, nil)
	if err != nil || replayed {
		t.Fatalf("SubmitFit: %v (replayed %v)", err, replayed)
	}
	if st.Total != 5*2 {
		t.Fatalf("total %d fits, want 10", st.Total)
	}
	again, replayed, err := r.client.SubmitFit(ctx, "harbour", "k1", up, s, data, 0, nil)
	if err != nil || !replayed || again.ID != st.ID {
		t.Fatalf("replay: %v, replayed %v, id %s want %s", err, replayed, again.ID, st.ID)
	}
	deadline := time.Now().Add(2 * time.Minute)
	for {
		st, err = r.client.FitStatus(ctx, "harbour", st.ID)
		if err != nil {
			t.Fatal(err)
		}
		if st.State.Final() {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("fit still %s after 2 min", st.State)
		}
		time.Sleep(50 * time.Millisecond)
	}
	if st.State != Done || st.Shards != 3 || st.Done != 10 {
		t.Fatalf("fit ended %s (%s), %d blocks, %d/%d fits; want done, 3 blocks, 10/10", st.State, st.Error, st.Shards, st.Done, st.Total)
	}
	got, err := r.client.FitFile(ctx, "harbour", st.ID, "fit.json")
	if err != nil {
		t.Fatal(err)
	}
	want, err := recovery.FitCollected(ctx, s, data, recovery.FitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	wb, err := want.JSON()
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(dropTiming(t, got), dropTiming(t, wb)) {
		t.Fatalf("fit.json from the queue differs from the in-process fit")
	}
	if _, err := r.client.FitStatus(ctx, "tug", st.ID); err != ErrNotFound {
		t.Fatalf("another owner: %v, want ErrNotFound", err)
	}
	if _, err := r.client.Status(ctx, "harbour", st.ID); err != ErrNotFound {
		t.Fatalf("the study route on a fit: %v, want ErrNotFound", err)
	}
	if err := r.client.DeleteFit(ctx, "harbour", st.ID); err != nil {
		t.Fatal(err)
	}
	keys, err := r.client.st.rdb.Keys(ctx, "*"+st.ID+"*").Result()
	if err != nil {
		t.Fatal(err)
	}
	var ours []string
	for _, k := range keys {
		if strings.HasPrefix(k, keyPrefix) {
			ours = append(ours, k)
		}
	}
	if len(ours) > 0 {
		t.Fatalf("after DeleteFit, keys left: %v", ours)
	}
	if _, err := r.client.FitStatus(ctx, "harbour", st.ID); err != ErrNotFound {
		t.Fatalf("after DeleteFit: %v, want ErrNotFound", err)
	}
}
