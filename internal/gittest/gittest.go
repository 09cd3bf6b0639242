// Package gittest makes real git repositories with the git command, for
// the integration tests of the pipeline and the CLI.
package gittest

import (
	"os"
	"os/exec"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/corpus"
)

// Run runs git in dir, isolated from the user's and the system's git
// configuration, and returns its output without the trailing newline. A
// failure fails the test with git's output.
func Run(t testing.TB, dir string, args ...string) string {
	t.Helper()
	cmd := exec.Command("git", args...)
	cmd.Dir = dir
	cmd.Env = append(os.Environ(), "GIT_CONFIG_NOSYSTEM=1", "HOME="+dir, "GIT_TERMINAL_PROMPT=0")
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("git %s: %v\n%s", strings.Join(args, " "), err, out)
	}
	return strings.TrimSpace(string(out))
}

// Init makes an empty repository on branch main in a temporary folder,
// with an identity to commit as (the invented Wrenfield Dev), and returns
// its path. It skips the test when git is not installed, or fails it when
// LOADLINE_REQUIRE_CORPUS=1 (corpus.Tool).
func Init(t testing.TB) string {
	t.Helper()
	corpus.Tool(t, "git", "git")
	dir := t.TempDir()
	Run(t, dir, "init", "-q", "-b", "main")
	Run(t, dir, "config", "user.email", "dev@wrenfield.example")
	Run(t, dir, "config", "user.name", "Wrenfield Dev")
	Run(t, dir, "config", "commit.gpgsign", "false")
	return dir
}
