package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"discrimen/worker/workertest"
)

// dbOffset keeps this package's tests on their own Redis database (worker
// uses offset 0, api offset 1).
const dbOffset = 2

var binDir string

func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "discrimen-test-bin-")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	binDir = dir
	code := m.Run()
	if err := os.RemoveAll(dir); err != nil {
		fmt.Fprintln(os.Stderr, "removing the test binaries:", err)
	}
	os.Exit(code)
}

var (
	buildOnce sync.Once
	binPath   string
	buildErr  error
)

// binary builds ./cmd/discrimen once per test run.
func binary(t testing.TB) string {
	t.Helper()
	buildOnce.Do(func() {
		binPath = filepath.Join(binDir, "discrimen")
		out, err := exec.Command("go", "build", "-o", binPath, ".").CombinedOutput()
		if err != nil {
			buildErr = fmt.Errorf("go build: %v\n%s", err, out)
		}
	})
	if buildErr != nil {
		t.Fatal(buildErr)
	}
	return binPath
}

// child is a discrimen process started by a test.
type child struct {
	name   string
	cmd    *exec.Cmd
	mu     sync.Mutex
	stderr bytes.Buffer
	lines  chan string
	done   chan struct{}
	err    error
}

// startChild runs the binary with args; it is killed at the end of the
// test if still running, and its stderr is logged when the test fails.
func startChild(t testing.TB, name string, args ...string) *child {
	t.Helper()
	return startChildEnv(t, name, nil, args...)
}

// startChildEnv is startChild with extra environment variables (KEY=VALUE).
func startChildEnv(t testing.TB, name string, env []string, args ...string) *child {
	t.Helper()
	c := &child{name: name, cmd: exec.Command(binary(t), args...), lines: make(chan string, 1000), done: make(chan struct{})}
	if env != nil {
		c.cmd.Env = append(os.Environ(), env...)
	}
	pipe, err := c.cmd.StderrPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := c.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() {
		sc := bufio.NewScanner(pipe)
		for sc.Scan() {
			c.mu.Lock()
			c.stderr.WriteString(sc.Text() + "\n")
			c.mu.Unlock()
			select {
			case c.lines <- sc.Text():
			default:
			}
		}
		c.err = c.cmd.Wait()
		close(c.done)
	}()
	t.Cleanup(func() {
		select {
		case <-c.done:
		default:
			if err := c.cmd.Process.Kill(); err != nil {
				t.Logf("killing %s: %v", c.name, err) // it may have exited meanwhile; done says
			}
			<-c.done
		}
		if t.Failed() {
			t.Logf("stderr of %s:\n%s", c.name, c.output())
		}
	})
	return c
}

func (c *child) output() string {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.stderr.String()
}

// waitFor returns the first submatch of re in a stderr line.
func (c *child) waitFor(t testing.TB, re *regexp.Regexp, timeout time.Duration) []string {
	t.Helper()
	deadline := time.After(timeout)
	for {
		select {
		case l := <-c.lines:
			if m := re.FindStringSubmatch(l); m != nil {
				return m
			}
		case <-c.done:
			t.Fatalf("%s exited (%v) before logging %s", c.name, c.err, re)
		case <-deadline:
			t.Fatalf("%s did not log %s within %v", c.name, re, timeout)
		}
	}
}

// stop sends SIGTERM and returns the exit code.
func (c *child) stop(t testing.TB, timeout time.Duration) int {
	t.Helper()
	if err := c.cmd.Process.Signal(syscall.SIGTERM); err != nil {
		t.Fatalf("SIGTERM to %s: %v", c.name, err)
	}
	select {
	case <-c.done:
	case <-time.After(timeout):
		t.Fatalf("%s did not exit within %v of SIGTERM", c.name, timeout)
	}
	return c.cmd.ProcessState.ExitCode()
}

var listeningRE = regexp.MustCompile(`msg="api listening" addr=(http://\S+)`)

// httpDo sends one request with an optional bearer key and JSON body.
func httpDo(t testing.TB, method, url, key string, body []byte) (int, []byte) {
	t.Helper()
	var rd io.Reader
	if body != nil {
		rd = bytes.NewReader(body)
	}
	req, err := http.NewRequest(method, url, rd)
	if err != nil {
		t.Fatal(err)
	}
	if key != "" {
		req.Header.Set("Authorization", "Bearer "+key)
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp.StatusCode, b
}

type apiStatus struct {
	ID       string `json:"id"`
	Status   string `json:"status"`
	Progress struct {
		Done  int `json:"done"`
		Total int `json:"total"`
	} `json:"progress"`
	Error *string `json:"error"`
}

// submitAndWait posts a study and polls it until it finishes.
func submitAndWait(t testing.TB, base, key, study string, timeout time.Duration) (apiStatus, time.Duration) {
	t.Helper()
	start := time.Now()
	code, body := httpDo(t, "POST", base+"/v1/studies", key, []byte(study))
	if code != http.StatusAccepted {
		t.Fatalf("POST: %d %s", code, body)
	}
	var sub struct {
		ID        string `json:"id"`
		StatusURL string `json:"status_url"`
	}
	if err := json.Unmarshal(body, &sub); err != nil {
		t.Fatalf("POST body %s: %v", body, err)
	}
	deadline := time.Now().Add(timeout)
	for {
		code, body := httpDo(t, "GET", base+sub.StatusURL, key, nil)
		var st apiStatus
		if code != 200 || json.Unmarshal(body, &st) != nil {
			t.Fatalf("status: %d %s", code, body)
		}
		if st.Status == "done" || st.Status == "failed" || st.Status == "canceled" {
			return st, time.Since(start)
		}
		if time.Now().After(deadline) {
			t.Fatalf("study %s still %s (%d/%d) after %v", st.ID, st.Status, st.Progress.Done, st.Progress.Total, timeout)
		}
		time.Sleep(50 * time.Millisecond)
	}
}

// serveStudy is an invented berth-watch scenario of 32 fits.
const serveStudy = `{
  "name": "berth-watch serve (invented)", "seed": 3,
  "designs": [{"name": "two-channels", "streams": 2, "cti_ms": [300, 900], "trials_per_cti": 20, "participants": 8}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [4, 8], "replicates": 20}
}`

// TestServeEmbedded: `serve` with no --redis warns that nothing persists,
// runs a study to the same report as `run`, and exits 0 on SIGTERM. With
// --no-auth on a non-loopback address it warns.
func TestServeEmbedded(t *testing.T) {
	c := startChild(t, "serve", "serve", "--no-auth", "--listen", "0.0.0.0:0", "--concurrency", "2")
	url := c.waitFor(t, listeningRE, 30*time.Second)[1]
	url = strings.Replace(url, "0.0.0.0", "127.0.0.1", 1)
	url = strings.Replace(url, "[::]", "127.0.0.1", 1)
	out := c.output()
	for _, want := range []string{"NOTHING PERSISTS", "--no-auth on a non-loopback address"} {
		if !strings.Contains(out, want) {
			t.Errorf("serve's stderr lacks %q:\n%s", want, out)
		}
	}
	st, _ := submitAndWait(t, url, "", serveStudy, time.Minute)
	if st.Status != "done" {
		t.Fatalf("study ended %s: %v", st.Status, st.Error)
	}
	code, body := httpDo(t, "GET", url+"/v1/studies/"+st.ID+"/report", "", nil)
	wantJSON, wantCSV := expectedReport(t, serveStudy)
	if code != 200 || !bytes.Equal(wantJSON, stripTiming(t, body)) {
		t.Fatalf("report through serve: %d, differs from discrimen run's", code)
	}
	if code, body := httpDo(t, "GET", url+"/v1/studies/"+st.ID+"/fits.csv", "", nil); code != 200 || !bytes.Equal(wantCSV, body) {
		t.Fatalf("fits.csv through serve: %d, differs from discrimen run's", code)
	}
	if code := c.stop(t, 40*time.Second); code != 0 {
		t.Fatalf("serve exited %d after SIGTERM, want 0", code)
	}
}

// TestServeNeedsKeysOrNoAuth: no way to authenticate is a usage error.
func TestServeNeedsKeysOrNoAuth(t *testing.T) {
	var stdout, stderr bytes.Buffer
	if code := dispatch([]string{"serve", "--listen", "127.0.0.1:0"}, &stdout, &stderr); code != 2 || !strings.Contains(stderr.String(), "--keys FILE") {
		t.Fatalf("serve without keys: exit %d, stderr %q", code, stderr.String())
	}
	stderr.Reset()
	if code := dispatch([]string{"worker"}, &stdout, &stderr); code != 2 || !strings.Contains(stderr.String(), "--redis URL") {
		t.Fatalf("worker without redis: exit %d, stderr %q", code, stderr.String())
	}
	stderr.Reset()
	if code := dispatch([]string{"api", "--redis", "redis-sentinel://127.0.0.1:26379", "--no-auth"}, &stdout, &stderr); code != 2 || !strings.Contains(stderr.String(), "master=NAME") {
		t.Fatalf("sentinel without master: exit %d, stderr %q", code, stderr.String())
	}
}

// The in-process report every queue path must reproduce.
var (
	expectedReport = workertest.Expected
	stripTiming    = workertest.WithoutTiming
)
