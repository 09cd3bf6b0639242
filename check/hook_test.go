package check

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

func TestHookInstallRefusesForeignAndChains(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	hooks := filepath.Join(g.dir, ".git", "hooks")
	os.MkdirAll(hooks, 0o755)
	foreign := filepath.Join(hooks, "pre-commit")
	os.WriteFile(foreign, []byte("#!/bin/sh\necho theirs\n"), 0o755)

	if _, err := r.InstallHook(HookOptions{Binary: "/usr/bin/loadline"}); err == nil || !strings.Contains(err.Error(), "--chain") {
		t.Fatalf("installing over a foreign hook: want a refusal naming --chain/--force, got %v", err)
	}
	p, err := r.InstallHook(HookOptions{Binary: "/usr/bin/loadline", Chain: true})
	if err != nil {
		t.Fatal(err)
	}
	body, _ := os.ReadFile(p)
	if !strings.Contains(string(body), foreign+chainedSuffix) || !strings.Contains(string(body), "'check' '--staged'") {
		t.Errorf("hook does not chain and check staged changes:\n%s", body)
	}
	if _, err := r.UninstallHook("pre-commit"); err != nil {
		t.Fatal(err)
	}
	restored, _ := os.ReadFile(foreign)
	if string(restored) != "#!/bin/sh\necho theirs\n" {
		t.Errorf("uninstall did not restore the chained hook: %q", restored)
	}
	if _, err := r.UninstallHook("pre-commit"); err == nil {
		t.Error("uninstalling a hook loadline did not write must refuse")
	}
}

func TestHookHonoursHooksPath(t *testing.T) {
	g := newGitRepo(t)
	g.git("config", "core.hooksPath", "tools/hooks")
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	p, err := r.InstallHook(HookOptions{Stage: "pre-push", Binary: "/usr/bin/loadline"})
	if err != nil {
		t.Fatal(err)
	}
	if want := filepath.Join(g.dir, "tools", "hooks", "pre-push"); p != want {
		t.Errorf("hook at %s, want %s", p, want)
	}
	if _, err := r.InstallHook(HookOptions{Stage: "post-merge"}); err == nil {
		t.Error("an unknown stage must be refused")
	}
}

// TestHookHonoursGlobalHooksPath: a core.hooksPath in the user's global git
// config is where git looks for hooks; a hook written to .git/hooks instead
// would never run, and one written to the shared folder runs everywhere.
func TestHookHonoursGlobalHooksPath(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	home := t.TempDir()
	hooks := filepath.Join(home, "team-hooks")
	t.Setenv("HOME", home)
	t.Setenv("XDG_CONFIG_HOME", "")
	t.Setenv("GIT_CONFIG_GLOBAL", "")
	t.Setenv("GIT_CONFIG_NOSYSTEM", "1")
	if err := os.WriteFile(filepath.Join(home, ".gitconfig"), []byte("[core]\n\thooksPath = "+hooks+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	// Every repository runs the hooks there: loadline says so instead of
	// installing a hook that refuses commits in repositories without a
	// budget file.
	if _, err := r.InstallHook(HookOptions{Binary: "/usr/bin/loadline"}); err == nil || !strings.Contains(err.Error(), "global git config") || !strings.Contains(err.Error(), hooks) {
		t.Fatalf("install under a global core.hooksPath: %v; want a refusal that names the shared folder", err)
	}
	p, err := r.InstallHook(HookOptions{Binary: "/usr/bin/loadline", Force: true})
	if err != nil {
		t.Fatal(err)
	}
	if want := filepath.Join(hooks, "pre-commit"); p != want {
		t.Errorf("hook at %s, want %s (the global core.hooksPath)", p, want)
	}
}

// TestHookScriptQuotesForTheShell: the hook runs the binary it names
// even when the path holds $, a backquote or a quote; Go's %q quoting let
// the shell expand $HOME in it.
func TestHookScriptQuotesForTheShell(t *testing.T) {
	g := newGitRepo(t)
	dir := filepath.Join(t.TempDir(), "it's $HOME `x`")
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	bin := filepath.Join(dir, "loadline")
	ran := filepath.Join(t.TempDir(), "ran")
	if err := os.WriteFile(bin, []byte("#!/bin/sh\nprintf '%s ' \"$@\" > '"+ran+"'\n"), 0o755); err != nil {
		t.Fatal(err)
	}
	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	p, err := r.InstallHook(HookOptions{Binary: bin, Args: []string{"--budget", "ci/$budget.yaml"}})
	if err != nil {
		t.Fatal(err)
	}
	if out, err := exec.Command("sh", p).CombinedOutput(); err != nil {
		t.Fatalf("running the hook: %v\n%s", err, out)
	}
	got, err := os.ReadFile(ran)
	if err != nil {
		t.Fatalf("the hook did not run %s: %v", bin, err)
	}
	if want := "check --staged --budget ci/$budget.yaml "; string(got) != want {
		t.Errorf("the hook passed %q, want %q", got, want)
	}
}
