package check

import (
	"bytes"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/go-git/go-git/v5/config"
)

// hookMarker is on the second line of every hook loadline writes; a hook
// without it belongs to someone else and is never overwritten silently.
const hookMarker = "# written by loadline hook install; remove with: loadline hook uninstall"

// chainedSuffix names the file an existing hook is moved to when loadline
// chains to it.
const chainedSuffix = ".before-loadline"

// HookOptions are the choices of `loadline hook install`.
type HookOptions struct {
	Stage  string // "pre-commit" (default) or "pre-push"
	Binary string // the loadline executable the hook runs
	Force  bool   // overwrite a hook loadline did not write; install into a hooks folder the global or system config shares
	Chain  bool   // keep an existing hook and run it first
	Args   []string
}

// HooksDir returns the folder git runs hooks from: core.hooksPath when set
// (relative to the top of the working tree), else <git dir>/hooks.
func (r *Repo) HooksDir() (string, error) {
	dir, _, err := r.hooksDir()
	return dir, err
}

// hooksDir is HooksDir and the config scope that set core.hooksPath:
// "local", "global", "system", or "" for the default folder.
func (r *Repo) hooksDir() (string, string, error) {
	p, scope, err := r.hooksPath()
	if err != nil {
		return "", "", err
	}
	if p != "" {
		if strings.HasPrefix(p, "~/") {
			if home, err := os.UserHomeDir(); err == nil {
				p = filepath.Join(home, p[2:])
			}
		}
		if !filepath.IsAbs(p) {
			p = filepath.Join(r.Root, p)
		}
		return p, scope, nil
	}
	return filepath.Join(r.CommonDir, "hooks"), "", nil
}

// hooksPath returns core.hooksPath as git reads it: the repository's own
// config first, then the user's global config (GIT_CONFIG_GLOBAL, else
// $XDG_CONFIG_HOME/git/config or ~/.gitconfig), then the system's unless
// GIT_CONFIG_NOSYSTEM is set. A hook written to .git/hooks while a global
// core.hooksPath is in force would never run.
func (r *Repo) hooksPath() (path, scope string, err error) {
	cfg, err := r.r.Config()
	if err != nil {
		return "", "", &EnvError{Err: fmt.Errorf("reading %s: %w", filepath.Join(r.CommonDir, "config"), err), Hint: "fix the repository's git config (git config --list --local shows what git makes of it)"}
	}
	if p := cfg.Raw.Section("core").Option("hooksPath"); p != "" {
		return p, "local", nil
	}
	var global *config.Config
	if f := os.Getenv("GIT_CONFIG_GLOBAL"); f != "" {
		b, rerr := os.ReadFile(f)
		if rerr == nil {
			global = config.NewConfig()
			rerr = global.Unmarshal(b)
		}
		err = rerr
	} else {
		global, err = config.LoadConfig(config.GlobalScope)
	}
	if err != nil && !os.IsNotExist(err) {
		return "", "", &EnvError{Err: fmt.Errorf("reading your global git config: %w", err), Hint: "fix it (git config --list --global shows what git makes of it)"}
	}
	if global != nil {
		if p := global.Raw.Section("core").Option("hooksPath"); p != "" {
			return p, "global", nil
		}
	}
	if os.Getenv("GIT_CONFIG_NOSYSTEM") != "" {
		return "", "", nil
	}
	system, err := config.LoadConfig(config.SystemScope)
	if err != nil {
		return "", "", &EnvError{Err: fmt.Errorf("reading the system git config: %w", err), Hint: "fix it (git config --list --system shows what git makes of it)"}
	}
	if p := system.Raw.Section("core").Option("hooksPath"); p != "" {
		return p, "system", nil
	}
	return "", "", nil
}

func hookScript(o HookOptions, chained string) string {
	var b strings.Builder
	b.WriteString("#!/bin/sh\n" + hookMarker + "\n")
	if chained != "" {
		// Run the hook that was there before; stop if it fails. A pre-push
		// hook reads the pushed refs on stdin, so save them for both.
		if o.Stage == "pre-push" {
			b.WriteString("input=$(cat)\n")
			fmt.Fprintf(&b, "printf '%%s\\n' \"$input\" | %s \"$@\" || exit $?\n", shellQuote(chained))
		} else {
			fmt.Fprintf(&b, "%s \"$@\" || exit $?\n", shellQuote(chained))
		}
	}
	mode, gitCmd := "--staged", "git commit --no-verify"
	if o.Stage == "pre-push" {
		mode, gitCmd = "--pre-push", "git push --no-verify"
	}
	args := append([]string{"check", mode}, o.Args...)
	quoted := make([]string, len(args))
	for i, a := range args {
		quoted[i] = shellQuote(a)
	}
	bin := shellQuote(o.Binary)
	escape := fmt.Sprintf("To %s anyway: %s (it skips every %s hook of this repository, not only loadline's; the pull request's check still runs).",
		map[string]string{"pre-commit": "commit", "pre-push": "push"}[o.Stage], gitCmd, o.Stage)
	if !strings.Contains(o.Binary, "/") {
		// Installed from PATH: look it up when the hook runs, so that the
		// hook keeps working when the binary is upgraded or moves.
		fmt.Fprintf(&b, "if ! command -v %s >/dev/null 2>&1; then\n", bin)
		fmt.Fprintf(&b, "  echo %s >&2\n", shellQuote("loadline: "+o.Binary+" is not on this hook's PATH, so the budget was not checked. Put it on PATH, or reinstall the hook with loadline hook install. "+escape))
		b.WriteString("  exit 1\nfi\n")
	}
	// The report goes to stderr, where git shows a hook's messages.
	if o.Stage == "pre-push" && chained != "" {
		fmt.Fprintf(&b, "printf '%%s\\n' \"$input\" | %s %s 1>&2\n", bin, strings.Join(quoted, " "))
	} else {
		fmt.Fprintf(&b, "%s %s 1>&2\n", bin, strings.Join(quoted, " "))
	}
	// On a refusal, say the way out and what it costs.
	b.WriteString("status=$?\nif [ \"$status\" -ne 0 ]; then\n")
	fmt.Fprintf(&b, "  echo \"loadline: the %s check stopped this (exit $status: 1 over budget or a model that cannot be measured, 2 a budget-file or usage error, 3 an environment error).\" >&2\n", o.Stage)
	fmt.Fprintf(&b, "  echo %s >&2\n", shellQuote("loadline: "+escape))
	b.WriteString("fi\nexit \"$status\"\n")
	return b.String()
}

// shellQuote quotes a word for sh: single quotes keep $, ` and \ as
// they are (Go's %q left $HOME and `…` to the shell to expand).
func shellQuote(w string) string {
	return "'" + strings.ReplaceAll(w, "'", `'\''`) + "'"
}

func validStage(s string) (string, error) {
	switch s {
	case "", "pre-commit":
		return "pre-commit", nil
	case "pre-push":
		return s, nil
	}
	return "", fmt.Errorf("--stage %q: loadline installs pre-commit or pre-push hooks", s)
}

// InstallHook writes the hook and returns its path.
func (r *Repo) InstallHook(o HookOptions) (string, error) {
	stage, err := validStage(o.Stage)
	if err != nil {
		return "", err
	}
	o.Stage = stage
	dir, scope, err := r.hooksDir()
	if err != nil {
		return "", err
	}
	if (scope == "global" || scope == "system") && !o.Force {
		// A hook there runs in every repository of the machine, and in
		// those without a budget file it would refuse every commit.
		return "", fmt.Errorf("core.hooksPath is set in your %s git config to %s, a hooks folder every repository shares: call loadline check %s from the %s hook there yourself, set a hooks folder for this repository (git config core.hooksPath .git/hooks), or pass --force to install there anyway", scope, dir, map[string]string{"pre-commit": "--staged", "pre-push": "--pre-push"}[stage], stage)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", &EnvError{Err: fmt.Errorf("making the hooks folder: %w", err), Hint: "git runs hooks from " + dir + " (core.hooksPath when set): make it a writable folder, or change core.hooksPath"}
	}
	p := filepath.Join(dir, stage)
	chained := ""
	if old, err := os.ReadFile(p); err == nil && !bytes.Contains(old, []byte(hookMarker)) {
		switch {
		case o.Chain:
			chained = p + chainedSuffix
			if _, err := os.Stat(chained); err == nil {
				return "", fmt.Errorf("%s exists already; move it away before chaining again", chained)
			}
			if err := os.Rename(p, chained); err != nil {
				return "", &EnvError{Err: err}
			}
		case !o.Force:
			return "", fmt.Errorf("%s exists and was not written by loadline; use --chain to run it before loadline, or --force to replace it", p)
		}
	} else if err == nil {
		// Reinstalling over our own hook keeps a chain we set up before.
		if _, err := os.Stat(p + chainedSuffix); err == nil {
			chained = p + chainedSuffix
		}
	}
	if err := os.WriteFile(p, []byte(hookScript(o, chained)), 0o755); err != nil {
		return "", &EnvError{Err: err}
	}
	return p, nil
}

// UninstallHook removes loadline's hook (restoring a chained one) and
// returns the path it removed.
func (r *Repo) UninstallHook(stage string) (string, error) {
	stage, err := validStage(stage)
	if err != nil {
		return "", err
	}
	dir, err := r.HooksDir()
	if err != nil {
		return "", err
	}
	p := filepath.Join(dir, stage)
	old, err := os.ReadFile(p)
	if os.IsNotExist(err) {
		return "", fmt.Errorf("no %s hook is installed in %s", stage, dir)
	}
	if err != nil {
		return "", &EnvError{Err: err}
	}
	if !bytes.Contains(old, []byte(hookMarker)) {
		return "", fmt.Errorf("%s was not written by loadline; leaving it alone", p)
	}
	if err := os.Remove(p); err != nil {
		return "", &EnvError{Err: err}
	}
	if _, err := os.Stat(p + chainedSuffix); err == nil {
		if err := os.Rename(p+chainedSuffix, p); err != nil {
			return "", &EnvError{Err: err}
		}
	}
	return p, nil
}
