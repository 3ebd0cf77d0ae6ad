package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"discrimen/api"
)

// TestKeyAdd: the key is printed once on stdout, only its hash is stored,
// and the stored line authenticates the printed key.
func TestKeyAdd(t *testing.T) {
	path := filepath.Join(t.TempDir(), "keys")
	var stdout, stderr bytes.Buffer
	if code := dispatch([]string{"key", "add", "harbour", "--keys", path}, &stdout, &stderr); code != 0 {
		t.Fatalf("key add: exit %d: %s", code, stderr.String())
	}
	key := strings.TrimSpace(stdout.String())
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if want := "harbour " + api.HashKey(key) + "\n"; string(data) != want {
		t.Fatalf("keys file %q, want %q", data, want)
	}
	if strings.Contains(stderr.String(), key) {
		t.Fatal("the key was also written to stderr")
	}
	ring, err := api.LoadKeys(path)
	if err != nil {
		t.Fatal(err)
	}
	if name, ok := ring.Lookup(key); !ok || name != "harbour" {
		t.Fatalf("Lookup of the printed key: %q %v", name, ok)
	}
	// Flags before the name work too; the second key is different.
	stdout.Reset()
	if code := dispatch([]string{"key", "add", "--keys", path, "pilot"}, &stdout, &stderr); code != 0 {
		t.Fatalf("key add with the name last: exit %d: %s", code, stderr.String())
	}
	if k2 := strings.TrimSpace(stdout.String()); k2 == key || k2 == "" {
		t.Fatalf("second key %q", k2)
	}
	for _, tc := range []struct {
		name string
		args []string
		code int
		want string
	}{
		{"repeated name", []string{"key", "add", "harbour", "--keys", path}, 1, `already holds a key named "harbour"`},
		{"bad name", []string{"key", "add", "har bour", "--keys", path}, 2, "use 1-64 letters"},
		{"no file", []string{"key", "add", "crew"}, 2, "usage: discrimen key add NAME --keys FILE"},
		{"no verb", []string{"key"}, 2, "usage: discrimen key add"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			t.Setenv(envKeys, "")
			var out, errb bytes.Buffer
			if code := dispatch(tc.args, &out, &errb); code != tc.code || !strings.Contains(errb.String(), tc.want) || out.Len() != 0 {
				t.Fatalf("exit %d, stdout %q, stderr %q; want exit %d with %q", code, out.String(), errb.String(), tc.code, tc.want)
			}
		})
	}
}
