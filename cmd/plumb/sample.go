package main

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"time"

	"plumb/agent/demo"
)

const (
	sampleTable  = demo.Table
	sampleTarget = demo.Target
)

// writeBuiltinSample writes the built-in sample database into a temporary
// folder and returns its path and a function that removes it.
func writeBuiltinSample() (string, func(), error) {
	dir, err := os.MkdirTemp("", "plumb-sample-")
	if err != nil {
		return "", nil, fmt.Errorf("built-in sample: %w", err)
	}
	cleanup := func() { os.RemoveAll(dir) }
	path := filepath.Join(dir, "districts.db")
	if err := demo.Default.WriteSQLite(context.Background(), path); err != nil {
		cleanup()
		return "", nil, fmt.Errorf("built-in sample: %w", err)
	}
	return path, cleanup, nil
}

func loadLocation(name string) (*time.Location, error) {
	if name == "" || name == "UTC" {
		return time.UTC, nil
	}
	loc, err := time.LoadLocation(name)
	if err != nil {
		return nil, usagef("--time-zone %q: not a time zone name known here (want e.g. Europe/Lisbon)", name)
	}
	return loc, nil
}
