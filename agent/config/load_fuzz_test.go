package config

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// fuzzSecret is the value of every variable and secret file in FuzzLoad:
// it must never show in an error or in the description.
const fuzzSecret = "Zq8-secret-Vx3"

// FuzzLoad runs the loader as the agent does: read the file, parse and
// validate, describe, then resolve secrets and ${VAR} references against a
// fixed environment. No input panics; errors are not empty and, like the
// description, never carry a secret's value. Seeds live in
// testdata/fuzz/FuzzLoad (and FuzzParse's in testdata/fuzz/FuzzParse).
func FuzzLoad(f *testing.F) {
	f.Add([]byte(full))
	dir := f.TempDir()
	env := func(name string) (string, bool) {
		if name == "UNSET" {
			return "", false
		}
		return fuzzSecret, true
	}
	read := func(path string) ([]byte, error) {
		if strings.Contains(path, "missing") {
			return nil, errors.New("no such file")
		}
		return []byte(fuzzSecret + "\n"), nil
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		path := filepath.Join(dir, "plumb.yaml")
		if err := os.WriteFile(path, data, 0o600); err != nil {
			t.Fatal(err)
		}
		c, err := Load(path)
		if err != nil {
			if msg := err.Error(); msg == "" || strings.Contains(msg, fuzzSecret) {
				t.Fatalf("load error %q", msg)
			}
			return
		}
		var sb strings.Builder
		c.Describe(&sb, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC), env)
		if strings.Contains(sb.String(), fuzzSecret) {
			t.Fatalf("the description shows a secret:\n%s", sb.String())
		}
		if err := c.Resolve(Resolver{Env: env, ReadFile: read}); err != nil {
			if msg := err.Error(); msg == "" || strings.Contains(msg, fuzzSecret) {
				t.Fatalf("resolve error %q", msg)
			}
			return
		}
		c.StoreURL()
		for name := range c.Sources {
			c.SourceURL(name)
		}
	})
}
