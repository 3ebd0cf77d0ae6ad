package api

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"discrimen/worker"
)

// loadStudy is the smallest study of the load test: 2 hypotheses × 4
// participants, 16 fits; seed varies per study.
func loadStudy(seed int) string {
	return fmt.Sprintf(`{
  "name": "berth-watch load %d (invented)", "seed": %d,
  "designs": [{"name": "two-channels", "streams": 2, "cti_ms": [300, 900], "trials_per_cti": 10, "participants": 4}],
  "hypotheses": [
    {"name": "steady-lamp", "family": "constant", "params": {"level": {"min": 0.2, "max": 1.8}}},
    {"name": "rising-watch", "family": "linear", "params": {"slope": {"min": 0, "max": 2}}}
  ],
  "replication": {"group_sizes": [2, 4], "replicates": 10}
}`, seed, seed)
}

// TestLoad: 50 small studies submitted at once and polled by 20 clients
// (one key each) on loopback. All complete, none is lost, and the p95
// latency of the status endpoint is logged.
func TestLoad(t *testing.T) {
	if testing.Short() {
		t.Skip("load test")
	}
	const clients, studies = 20, 50
	names := make([]string, clients)
	for i := range names {
		names[i] = fmt.Sprintf("client-%02d", i)
	}
	r := newRig(t, nil, names...)
	var mu sync.Mutex
	var latencies []time.Duration
	owned := map[string][]string{}
	errs := make(chan error, clients)
	start := time.Now()
	var wg sync.WaitGroup
	for c := 0; c < clients; c++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			name := names[c]
			key := r.keys[name]
			hc := &http.Client{Timeout: 10 * time.Second}
			get := func(path string) (int, []byte, time.Duration, error) {
				req, err := http.NewRequest("GET", r.http.URL+path, nil)
				if err != nil {
					return 0, nil, 0, err
				}
				req.Header.Set("Authorization", "Bearer "+key)
				t0 := time.Now()
				resp, err := hc.Do(req)
				if err != nil {
					return 0, nil, 0, err
				}
				defer resp.Body.Close()
				b, err := io.ReadAll(resp.Body)
				return resp.StatusCode, b, time.Since(t0), err
			}
			// Client c submits studies c, c+20, c+40.
			var ids []string
			for s := c; s < studies; s += clients {
				req, err := http.NewRequest("POST", r.http.URL+"/v1/studies", strings.NewReader(loadStudy(s+1)))
				if err != nil {
					errs <- err
					return
				}
				req.Header.Set("Authorization", "Bearer "+key)
				req.Header.Set("Content-Type", "application/json")
				resp, err := hc.Do(req)
				if err != nil {
					errs <- err
					return
				}
				var sub submitBody
				derr := json.NewDecoder(resp.Body).Decode(&sub)
				cerr := resp.Body.Close()
				if resp.StatusCode != http.StatusAccepted || derr != nil || cerr != nil {
					errs <- fmt.Errorf("%s: submit %d (%v, %v)", name, resp.StatusCode, derr, cerr)
					return
				}
				ids = append(ids, sub.ID)
			}
			mu.Lock()
			owned[name] = ids
			mu.Unlock()
			pending := append([]string(nil), ids...)
			deadline := time.Now().Add(2 * time.Minute)
			for len(pending) > 0 {
				if time.Now().After(deadline) {
					errs <- fmt.Errorf("%s: %d studies unfinished after 2 min", name, len(pending))
					return
				}
				var still []string
				for _, id := range pending {
					code, body, d, err := get("/v1/studies/" + id)
					if err != nil || code != 200 {
						errs <- fmt.Errorf("%s: status of %s: %d %v", name, id, code, err)
						return
					}
					mu.Lock()
					latencies = append(latencies, d)
					mu.Unlock()
					var st statusBody
					if err := json.Unmarshal(body, &st); err != nil {
						errs <- fmt.Errorf("%s: status of %s: %v", name, id, err)
						return
					}
					switch st.Status {
					case worker.Done:
					case worker.Failed, worker.Canceled:
						errs <- fmt.Errorf("%s: study %s ended %s: %v", name, id, st.Status, st.Error)
						return
					default:
						still = append(still, id)
					}
				}
				pending = still
				time.Sleep(100 * time.Millisecond)
			}
			for _, id := range ids {
				if code, body, _, err := get("/v1/studies/" + id + "/report"); err != nil || code != 200 || !strings.Contains(string(body), `"study_file"`) {
					errs <- fmt.Errorf("%s: report of %s: %d %v", name, id, code, err)
					return
				}
			}
			// None lost: the client's list holds exactly its studies.
			code, body, _, err := get("/v1/studies?limit=100")
			var l listBody
			if err == nil {
				err = json.Unmarshal(body, &l)
			}
			if err != nil || code != 200 || len(l.Studies) != len(ids) {
				errs <- fmt.Errorf("%s: list has %d studies, submitted %d (%d %v)", name, len(l.Studies), len(ids), code, err)
			}
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	if t.Failed() {
		return
	}
	total := 0
	for _, ids := range owned {
		total += len(ids)
	}
	if total != studies {
		t.Fatalf("%d studies submitted, want %d", total, studies)
	}
	sort.Slice(latencies, func(i, j int) bool { return latencies[i] < latencies[j] })
	p := func(q float64) time.Duration { return latencies[int(q*float64(len(latencies)-1))] }
	t.Logf("%d studies by %d clients done in %.1f s; %d status requests: p50 %.1f ms, p95 %.1f ms, max %.1f ms",
		studies, clients, time.Since(start).Seconds(), len(latencies),
		p(0.5).Seconds()*1000, p(0.95).Seconds()*1000, latencies[len(latencies)-1].Seconds()*1000)
}
