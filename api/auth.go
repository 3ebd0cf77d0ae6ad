package api

import (
	"bufio"
	"bytes"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"regexp"
	"strings"
	"sync"
	"time"
)

// A keys file holds one API key per line as "NAME HASH": NAME is the key's
// owner as studies record it and HASH the hex SHA-256 of the key. Blank
// lines and lines starting with # are ignored. The keys themselves are never
// stored.

// keyPrefix starts every key, so a leaked key is recognisable in a scan.
const keyPrefix = "dsk_"

// nameRE is the form of a key name: it becomes part of a Redis key.
var nameRE = regexp.MustCompile(`^[A-Za-z0-9._-]{1,64}$`)

// ValidKeyName reports whether name can name a key.
func ValidKeyName(name string) bool { return nameRE.MatchString(name) }

// NewKey returns a fresh random key (32 bytes from crypto/rand) and the hex
// SHA-256 hash to store for it.
func NewKey() (key, hash string) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		panic("api: crypto/rand: " + err.Error())
	}
	key = keyPrefix + base64.RawURLEncoding.EncodeToString(b[:])
	return key, HashKey(key)
}

// HashKey is the stored form of a key: hex(SHA-256(key)).
func HashKey(key string) string {
	h := sha256.Sum256([]byte(key))
	return hex.EncodeToString(h[:])
}

// AppendKey adds a "NAME HASH" line to the keys file, creating it with
// mode 0600. A name already in the file is an error.
func AppendKey(path, name, hash string) error {
	if !ValidKeyName(name) {
		return fmt.Errorf("key name %q: use 1-64 letters, digits, '.', '_' or '-'", name)
	}
	if _, err := hex.DecodeString(hash); err != nil || len(hash) != 64 {
		panic("api: AppendKey needs a hex SHA-256 hash")
	}
	existing, err := os.ReadFile(path)
	if err != nil && !errors.Is(err, fs.ErrNotExist) {
		return err
	}
	if len(existing) > 0 {
		entries, err := parseKeys(existing)
		if err != nil {
			return fmt.Errorf("%s: %w", path, err)
		}
		for _, e := range entries {
			if e.name == name {
				return fmt.Errorf("%s already holds a key named %q", path, name)
			}
		}
	}
	f, err := os.OpenFile(path, os.O_APPEND|os.O_CREATE|os.O_WRONLY, 0o600)
	if err != nil {
		return err
	}
	line := name + " " + hash + "\n"
	if len(existing) > 0 && !bytes.HasSuffix(existing, []byte("\n")) {
		line = "\n" + line
	}
	if _, err := f.WriteString(line); err != nil {
		return errors.Join(err, f.Close())
	}
	return f.Close()
}

type keyEntry struct {
	name string
	hash [sha256.Size]byte
}

func parseKeys(data []byte) ([]keyEntry, error) {
	var out []keyEntry
	seen := map[string]int{}
	sc := bufio.NewScanner(bytes.NewReader(data))
	for n := 1; sc.Scan(); n++ {
		line := strings.TrimSpace(sc.Text())
		if line == "" || strings.HasPrefix(line, "#") {
			continue
		}
		f := strings.Fields(line)
		if len(f) != 2 {
			return nil, fmt.Errorf("line %d: want NAME HASH, got %d fields", n, len(f))
		}
		if !ValidKeyName(f[0]) {
			return nil, fmt.Errorf("line %d: key name %q: use 1-64 letters, digits, '.', '_' or '-'", n, f[0])
		}
		h, err := hex.DecodeString(f[1])
		if err != nil || len(h) != sha256.Size {
			return nil, fmt.Errorf("line %d: the hash of %q must be 64 hex digits (SHA-256)", n, f[0])
		}
		if prev, ok := seen[f[0]]; ok {
			return nil, fmt.Errorf("line %d: key name %q repeats line %d", n, f[0], prev)
		}
		seen[f[0]] = n
		e := keyEntry{name: f[0]}
		copy(e.hash[:], h)
		out = append(out, e)
	}
	return out, sc.Err()
}

// KeyRing checks bearer keys against a keys file. It rereads the file when
// its modification time changes (checked at most once a second), so `key
// add` takes effect without a restart.
type KeyRing struct {
	path    string
	mu      sync.Mutex
	entries []keyEntry
	mtime   time.Time
	checked time.Time
	log     *slog.Logger
	// problem is the last reload failure logged, so that a bad edit is
	// logged once, not at every check.
	problem string
}

func (k *KeyRing) setLogger(l *slog.Logger) {
	k.mu.Lock()
	defer k.mu.Unlock()
	k.log = l
}

// LoadKeys reads a keys file. An empty file is allowed (no key works yet).
func LoadKeys(path string) (*KeyRing, error) {
	k := &KeyRing{path: path}
	if err := k.reload(); err != nil {
		return nil, err
	}
	return k, nil
}

func (k *KeyRing) reload() error {
	fi, err := os.Stat(k.path)
	if err != nil {
		return err
	}
	data, err := os.ReadFile(k.path)
	if err != nil {
		return err
	}
	entries, err := parseKeys(data)
	if err != nil {
		return fmt.Errorf("%s: %w", k.path, err)
	}
	k.entries, k.mtime = entries, fi.ModTime()
	return nil
}

// refresh rereads the file when it changed. A file that cannot be read or
// does not parse keeps the keys loaded before it, with a warning logged
// once per distinct problem. k.mu is held.
func (k *KeyRing) refresh() {
	fi, err := os.Stat(k.path)
	if err == nil && fi.ModTime().Equal(k.mtime) {
		return
	}
	if err == nil {
		err = k.reload()
	}
	if err == nil {
		k.problem = ""
		return
	}
	if msg := err.Error(); msg != k.problem {
		k.problem = msg
		if k.log != nil {
			k.log.Warn("keys file: keeping the keys loaded before this change", "keys", k.path, "keys_loaded", len(k.entries), "err", err)
		}
	}
}

// Len is the number of keys.
func (k *KeyRing) Len() int {
	k.mu.Lock()
	defer k.mu.Unlock()
	return len(k.entries)
}

// Lookup returns the name of the key, if it is in the ring. Every stored
// hash is compared, in constant time, whatever matches, so the time taken
// says nothing about which key or how much of it matched.
func (k *KeyRing) Lookup(key string) (string, bool) {
	k.mu.Lock()
	if now := time.Now(); now.Sub(k.checked) >= time.Second {
		k.checked = now
		k.refresh()
	}
	entries := k.entries
	k.mu.Unlock()
	h := sha256.Sum256([]byte(key))
	found := -1
	for i := range entries {
		if subtle.ConstantTimeCompare(h[:], entries[i].hash[:]) == 1 {
			found = i
		}
	}
	if found < 0 {
		return "", false
	}
	return entries[found].name, true
}
