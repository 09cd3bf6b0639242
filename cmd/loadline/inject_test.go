package main

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
)

// Hostile file names, committed to a real repository: each tries to write
// a line the GitHub Actions runner takes for a workflow command (a line
// that starts with "::", or holds "##[" anywhere), a line the Azure
// Pipelines agent takes for a logging command (one that holds "##vso["
// anywhere: the agent's Command.TryParse looks for it with IndexOf, in
// microsoft/azure-pipelines-agent src/Agent.Worker/Command.cs), or to move
// the cursor. The same text reports are printed under any CI, supported or
// not.
var hostileNames = []string{
	"models/x\n::add-mask::hunter2\n::error title=INJECTED::pwned.onnx",
	"::error title=ROOT::lead.onnx",
	"models/legacy ##[error]old-form.onnx",
	"models/esc\x1b[2K\r::warning::cr.onnx",
	"models/az\n##vso[task.setvariable variable=LOADLINE_PWNED]yes.onnx",
	"models/azure mid-line ##vso[task.complete result=Succeeded]done.onnx",
	"##[add-mask]hunter2/##VSO[task.setsecret]lead.onnx",
}

// ownAnnotation is the form of loadline's own workflow commands: the level,
// the file and title properties with ':' and ',' escaped, then the message.
var ownAnnotation = regexp.MustCompile(`^::(error|warning) (file=[^:,]*,)?title=loadline%3A [^:]*::`)

// checkCILines fails when any line of text could be read by a CI runner
// as a command other than loadline's own annotations, or holds a raw
// control character.
func checkCILines(t *testing.T, what, text string, annotations bool) {
	t.Helper()
	for i, line := range strings.Split(text, "\n") {
		trimmed := strings.TrimLeft(line, " \t")
		if strings.HasPrefix(trimmed, "::") && !(annotations && ownAnnotation.MatchString(line)) {
			t.Errorf("%s line %d starts a workflow command: %q", what, i+1, line)
		}
		if strings.Contains(line, "##[") {
			t.Errorf("%s line %d holds the legacy command opener: %q", what, i+1, line)
		}
		if strings.Contains(strings.ToLower(line), "##vso[") {
			t.Errorf("%s line %d holds Azure Pipelines' command opener: %q", what, i+1, line)
		}
		if strings.ContainsAny(line, "\r\x1b\x00") {
			t.Errorf("%s line %d holds a control character: %q", what, i+1, line)
		}
	}
}

// TestHostileFileNamesWriteNoCommands commits models under hostile names,
// runs check in every format with --post under GitHub Actions, and measure,
// and reads every output: standard output, standard error, the report
// file, the job summary and the posted comment.
func TestHostileFileNamesWriteNoCommands(t *testing.T) {
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "models/base.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	for _, name := range hostileNames {
		writeFile(t, dir, name, convModel(t, 200)) // over the params limit
	}
	writeFile(t, dir, "models/bad\n::error title=E::broken.onnx", []byte("\x0a\x05not a model")) // cannot be measured
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "hostile names")
	if got := git(t, dir, "ls-files", "-z"); strings.Count(got, "\x00") < len(hostileNames)+2 {
		t.Fatalf("the names were not committed: %q", got)
	}

	const token = "ghs_loadlineTestToken0123456789"
	var mu sync.Mutex
	var posted []string
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		w.Header().Set("Content-Type", "application/json")
		switch {
		case r.Method == "GET" && strings.HasSuffix(r.URL.Path, "/issues/7/comments"):
			fmt.Fprint(w, "[]")
		case r.Method == "POST" && strings.HasSuffix(r.URL.Path, "/issues/7/comments"):
			b, _ := io.ReadAll(r.Body)
			var in struct{ Body string }
			json.Unmarshal(b, &in)
			mu.Lock()
			posted = append(posted, in.Body)
			mu.Unlock()
			w.WriteHeader(http.StatusCreated)
			fmt.Fprint(w, `{"id":1}`)
		default:
			w.WriteHeader(http.StatusNotFound)
		}
	}))
	defer srv.Close()
	ci := t.TempDir()
	event := filepath.Join(ci, "event.json")
	os.WriteFile(event, []byte(`{"number":7,"pull_request":{"number":7,"head":{"sha":"1111111111111111111111111111111111111111","repo":{"full_name":"wrenfield/porch"}},"base":{"ref":"main","repo":{"full_name":"wrenfield/porch"}}}}`), 0o644)
	summary := filepath.Join(ci, "summary.md")
	for k, v := range map[string]string{
		"GITHUB_ACTIONS": "true", "GITHUB_REPOSITORY": "wrenfield/porch", "GITHUB_API_URL": srv.URL + "/api/v3",
		"GITHUB_TOKEN": token, "GITHUB_EVENT_NAME": "pull_request", "GITHUB_EVENT_PATH": event,
		"GITHUB_STEP_SUMMARY": summary, "GITHUB_OUTPUT": filepath.Join(ci, "output"), "GITHUB_BASE_REF": "",
	} {
		t.Setenv(k, v)
	}

	annotated := 0
	for _, format := range []string{"text", "markdown", "json", "junit"} {
		t.Run(format, func(t *testing.T) {
			args := []string{"check", "--base", "HEAD~1", "--post", "--format", format}
			outFile := ""
			if format == "json" || format == "junit" {
				outFile = filepath.Join(ci, "report."+format)
				args = append(args, "--out", outFile)
			}
			code, out, errs := inDir(t, dir, args...)
			if code != exitBudget {
				t.Fatalf("exit %d, want %d\n%s", code, exitBudget, errs)
			}
			checkCILines(t, "stdout", out, true)
			checkCILines(t, "stderr", errs, false)
			for _, line := range strings.Split(out, "\n") {
				if ownAnnotation.MatchString(line) {
					annotated++
				}
			}
			if outFile != "" {
				data, err := os.ReadFile(outFile)
				if err != nil {
					t.Fatal(err)
				}
				checkCILines(t, format+" report", string(data), false)
				if format == "json" {
					// The JSON contract keeps each path exactly as git names it.
					var doc struct {
						Models []struct{ Path string }
					}
					if err := json.Unmarshal(data, &doc); err != nil {
						t.Fatal(err)
					}
					found := map[string]bool{}
					for _, m := range doc.Models {
						found[m.Path] = true
					}
					for _, name := range hostileNames {
						if !found[name] {
							t.Errorf("JSON has no model with the path %q", name)
						}
					}
				}
			}
		})
	}
	if annotated == 0 {
		t.Error("no annotation of loadline's own was written: the test would not see one slip through")
	}
	s, _ := os.ReadFile(summary)
	checkCILines(t, "job summary", string(s), false)
	mu.Lock()
	for i, body := range posted {
		checkCILines(t, fmt.Sprintf("comment %d", i), body, false)
	}
	mu.Unlock()
	if len(posted) == 0 {
		t.Error("nothing posted")
	}

	t.Run("measure", func(t *testing.T) {
		var files []string
		for _, name := range hostileNames {
			files = append(files, filepath.Join(dir, name))
		}
		files = append(files, filepath.Join(dir, "models/bad\n::error title=E::broken.onnx"))
		for _, format := range []string{"--layers", "--json"} {
			code, out, errs := inDir(t, dir, append([]string{"measure", format}, files...)...)
			if code != exitBudget {
				t.Fatalf("exit %d, want %d (one file is not a model)\n%s", code, exitBudget, errs)
			}
			checkCILines(t, "measure "+format+" stdout", out, false)
			checkCILines(t, "measure "+format+" stderr", errs, false)
		}
	})
}
