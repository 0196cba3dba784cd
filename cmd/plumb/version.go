package main

import (
	"fmt"
	"runtime"
	"runtime/debug"

	"github.com/spf13/cobra"
)

// buildInfo is what `plumb version` says about the binary, read from the
// build information the Go toolchain embeds.
type buildInfo struct {
	Version  string // module version, "(devel)" for a build from a checkout
	Commit   string // VCS revision, "" when the build did not record one
	Modified bool   // the checkout had uncommitted changes
	Go       string // toolchain version
}

func readBuildInfo() buildInfo {
	b := buildInfo{Version: "(devel)", Go: runtime.Version()}
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return b
	}
	if v := info.Main.Version; v != "" {
		b.Version = v
	}
	if info.GoVersion != "" {
		b.Go = info.GoVersion
	}
	for _, s := range info.Settings {
		switch s.Key {
		case "vcs.revision":
			b.Commit = s.Value
		case "vcs.modified":
			b.Modified = s.Value == "true"
		}
	}
	return b
}

// versionLine is the one line `plumb version` and `plumb --version` print:
// "plumb v1.2.0, commit 3f2a9c1d0e4b, go1.26.8".
func versionLine() string {
	b := readBuildInfo()
	commit := "not recorded"
	if b.Commit != "" {
		commit = b.Commit
		if len(commit) > 12 {
			commit = commit[:12]
		}
		if b.Modified {
			commit += " with local changes"
		}
	}
	return fmt.Sprintf("plumb %s, commit %s, %s", b.Version, commit, b.Go)
}

func newVersionCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "version",
		Short: "print plumb's version, commit and Go version",
		Long: `version prints the version of plumb, the commit it was built from and the Go
version that built it, as the Go toolchain recorded them in the binary. A
build from a checkout says (devel); the commit is recorded by go build in a
git checkout unless -buildvcs=false.`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, args []string) error {
			_, err := fmt.Fprintln(cmd.OutOrStdout(), versionLine())
			return err
		},
	}
}
