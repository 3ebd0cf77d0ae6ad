// Package deploy holds the container and monitoring files. No Docker engine
// runs on the build machines, so these tests parse the files and check that
// they agree with each other and with the binary's flags.
package deploy

import (
	"net"
	"os"
	"regexp"
	"slices"
	"strings"
	"testing"

	"go.yaml.in/yaml/v3"
)

type composeFile struct {
	Services map[string]struct {
		Image   string   `yaml:"image"`
		Command []string `yaml:"command"`
		Build   *struct {
			Context    string `yaml:"context"`
			Dockerfile string `yaml:"dockerfile"`
		} `yaml:"build"`
		Volumes   []string  `yaml:"volumes"`
		Ports     []string  `yaml:"ports"`
		DependsOn dependsOn `yaml:"depends_on"`
	} `yaml:"services"`
	Volumes map[string]any `yaml:"volumes"`
}

// dependsOn reads both compose forms: a list of names or a map of name to
// condition.
type dependsOn map[string]bool

func (d *dependsOn) UnmarshalYAML(n *yaml.Node) error {
	*d = dependsOn{}
	switch n.Kind {
	case yaml.SequenceNode:
		var names []string
		if err := n.Decode(&names); err != nil {
			return err
		}
		for _, s := range names {
			(*d)[s] = true
		}
	case yaml.MappingNode:
		var m map[string]any
		if err := n.Decode(&m); err != nil {
			return err
		}
		for s := range m {
			(*d)[s] = true
		}
	}
	return nil
}

type promConfig struct {
	ScrapeConfigs []struct {
		JobName       string `yaml:"job_name"`
		MetricsPath   string `yaml:"metrics_path"`
		StaticConfigs []struct {
			Targets []string `yaml:"targets"`
		} `yaml:"static_configs"`
	} `yaml:"scrape_configs"`
}

func parse(t *testing.T, path string, v any) {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	dec := yaml.NewDecoder(strings.NewReader(string(data)))
	dec.KnownFields(false)
	if err := dec.Decode(v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}

// flagValue returns the value after a flag in a command line.
func flagValue(cmd []string, flag string) string {
	for i, a := range cmd {
		if a == flag && i+1 < len(cmd) {
			return cmd[i+1]
		}
		if v, ok := strings.CutPrefix(a, flag+"="); ok {
			return v
		}
	}
	return ""
}

func port(t *testing.T, addr string) string {
	t.Helper()
	_, p, err := net.SplitHostPort(addr)
	if err != nil {
		t.Fatalf("address %q: %v", addr, err)
	}
	return p
}

// TestCompose: redis with append-only persistence on a volume and a memory
// cap that never evicts, the API and
// two workers on it, Prometheus scraping exactly the API and the workers on
// the ports they listen on.
func TestCompose(t *testing.T) {
	var c composeFile
	parse(t, "../docker-compose.yml", &c)
	var names []string
	for n := range c.Services {
		names = append(names, n)
	}
	slices.Sort(names)
	if want := []string{"api", "prometheus", "redis", "worker-1", "worker-2"}; !slices.Equal(names, want) {
		t.Fatalf("services %v, want %v", names, want)
	}
	redis := c.Services["redis"]
	if flagValue(redis.Command, "--appendonly") != "yes" {
		t.Fatalf("redis command %v lacks --appendonly yes", redis.Command)
	}
	// Study data must never be evicted silently: a memory cap is set and
	// the policy refuses writes when it is reached.
	if flagValue(redis.Command, "--maxmemory") == "" {
		t.Errorf("redis command %v sets no --maxmemory", redis.Command)
	}
	if got := flagValue(redis.Command, "--maxmemory-policy"); got != "noeviction" {
		t.Errorf("redis --maxmemory-policy %q, want noeviction", got)
	}
	if !slices.ContainsFunc(redis.Volumes, func(v string) bool { return strings.HasSuffix(v, ":/data") }) {
		t.Fatalf("redis volumes %v do not keep /data", redis.Volumes)
	}
	var prom promConfig
	parse(t, "prometheus.yml", &prom)
	targets := map[string]bool{}
	for _, sc := range prom.ScrapeConfigs {
		if sc.MetricsPath != "" && sc.MetricsPath != "/metrics" {
			t.Errorf("job %s scrapes %s, the binary serves /metrics", sc.JobName, sc.MetricsPath)
		}
		for _, st := range sc.StaticConfigs {
			for _, tg := range st.Targets {
				targets[tg] = true
			}
		}
	}
	want := map[string]bool{}
	for _, n := range []string{"api", "worker-1", "worker-2"} {
		s := c.Services[n]
		if s.Build == nil || s.Build.Dockerfile != "deploy/Dockerfile" || s.Build.Context != "." {
			t.Errorf("%s is not built from deploy/Dockerfile", n)
		}
		if len(s.Command) == 0 {
			t.Fatalf("%s has no command", n)
		}
		if got := flagValue(s.Command, "--redis"); got != "redis://redis:6379/0" {
			t.Errorf("%s --redis %q, want the compose redis", n, got)
		}
		if !s.DependsOn["redis"] {
			t.Errorf("%s does not depend on redis", n)
		}
		switch s.Command[0] {
		case "api":
			listen := flagValue(s.Command, "--listen")
			if flagValue(s.Command, "--keys") == "" || slices.Contains(s.Command, "--no-auth") {
				t.Errorf("api runs without keys: %v", s.Command)
			}
			want[n+":"+port(t, listen)] = true
		case "worker":
			want[n+":"+port(t, flagValue(s.Command, "--metrics-listen"))] = true
		default:
			t.Errorf("%s runs %q, want api or worker", n, s.Command[0])
		}
	}
	for tg := range want {
		if !targets[tg] {
			t.Errorf("prometheus does not scrape %s", tg)
		}
	}
	for tg := range targets {
		if !want[tg] {
			t.Errorf("prometheus scrapes %s, which no service listens on", tg)
		}
	}
	pr := c.Services["prometheus"]
	if !slices.ContainsFunc(pr.Volumes, func(v string) bool {
		return strings.HasPrefix(v, "./deploy/prometheus.yml:/etc/prometheus/prometheus.yml")
	}) {
		t.Errorf("prometheus does not mount deploy/prometheus.yml: %v", pr.Volumes)
	}
	for _, v := range []string{"redis-data", "keys"} {
		if _, ok := c.Volumes[v]; !ok {
			t.Errorf("named volume %s is not declared", v)
		}
	}
}

// TestDockerfile: multi-stage, static (CGO off), non-root final stage.
func TestDockerfile(t *testing.T) {
	data, err := os.ReadFile("Dockerfile")
	if err != nil {
		t.Fatal(err)
	}
	var froms, users []string
	for _, line := range strings.Split(string(data), "\n") {
		f := strings.Fields(line)
		if len(f) < 2 {
			continue
		}
		switch strings.ToUpper(f[0]) {
		case "FROM":
			froms = append(froms, f[1])
			users = users[:0] // USER applies to its own stage
		case "USER":
			users = append(users, f[1])
		}
	}
	if len(froms) < 2 {
		t.Fatalf("%d stages, want a multi-stage build", len(froms))
	}
	if last := froms[len(froms)-1]; last != "scratch" && !strings.Contains(last, "distroless") {
		t.Errorf("final stage %q, want an empty or distroless base", last)
	}
	if !regexp.MustCompile(`CGO_ENABLED=0 .*go build .*\./cmd/discrimen`).Match(data) {
		t.Error("the binary is not built with CGO_ENABLED=0 from ./cmd/discrimen")
	}
	if len(users) == 0 {
		t.Fatal("the final stage sets no USER")
	}
	if u := strings.Split(users[len(users)-1], ":")[0]; u == "root" || u == "0" {
		t.Fatalf("the final stage runs as %q", u)
	}
}
