package recovery

import (
	"os/exec"
	"strings"
	"testing"
)

// TestNoPresentationDeps guards the package boundary: recovery computes
// and never draws, so neither it nor anything it imports may depend on
// html/template or gonum/plot (package pages owns the pages and charts).
func TestNoPresentationDeps(t *testing.T) {
	gobin, err := exec.LookPath("go")
	if err != nil {
		t.Skipf("no go command to list dependencies: %v", err)
	}
	out, err := exec.Command(gobin, "list", "-deps", ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go list -deps: %v\n%s", err, out)
	}
	deps := strings.Fields(string(out))
	if len(deps) < 10 || deps[len(deps)-1] != "discrimen/recovery" {
		t.Fatalf("go list -deps gave %d packages ending in %q, want recovery's dependencies", len(deps), deps[len(deps)-1])
	}
	for _, d := range deps {
		if d == "html/template" || d == "text/template" || strings.HasPrefix(d, "gonum.org/v1/plot") {
			t.Errorf("recovery depends on %s", d)
		}
	}
}
