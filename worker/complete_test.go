package worker

import (
	"bytes"
	"context"
	"testing"
	"time"
)

// TestCompleteOnce: the first assembly's report stands; an assembly that
// finishes after the study is done (a duplicate, or a retry of one whose
// answer was lost) changes neither the files nor the assembly count.
func TestCompleteOnce(t *testing.T) {
	r := newRig(t, nil)
	srv := r.server(t, nil)
	defer srv.Shutdown()
	st := r.submit(t, "harbour", tinyStudy)
	st = r.wait(t, "harbour", st.ID, time.Minute, final)
	if st.State != Done || st.Assemblies != 1 {
		t.Fatalf("study %s with %d assemblies, want done with 1", st.State, st.Assemblies)
	}
	ctx := context.Background()
	before, err := r.client.Report(ctx, "harbour", st.ID, ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	late := map[ReportKind][]byte{}
	for _, k := range ReportKinds {
		late[k] = []byte("x\n")
	}
	ok, err := srv.st.complete(ctx, st.ID, late, time.Now())
	if err != nil || ok {
		t.Fatalf("a late completion: applied %v (%v), want false", ok, err)
	}
	after, err := r.client.Report(ctx, "harbour", st.ID, ReportJSON)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(before, after) {
		t.Fatal("a late completion changed report.json")
	}
	if s, err := r.client.Status(ctx, "harbour", st.ID); err != nil || s.Assemblies != 1 || !s.Finished.Equal(st.Finished) {
		t.Fatalf("after a late completion: %d assemblies, finished %v (%v); want 1 and %v", s.Assemblies, s.Finished, err, st.Finished)
	}
	if _, err := srv.st.complete(ctx, newStudyID(time.Now()), late, time.Now()); err != ErrNotFound {
		t.Fatalf("completing a study that is not stored: %v, want ErrNotFound", err)
	}
}
