package main

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
)

// TestCheckPostsToGitHub runs `loadline check --post` as a GitHub Actions
// job would, against an in-process stand-in for the GitHub API: the
// comment is created with the marker, the job summary and annotations are
// written, and the verdict (over budget: exit 1) is unchanged by posting.
func TestCheckPostsToGitHub(t *testing.T) {
	dir := newRepo(t)
	writeFile(t, dir, "loadline.yaml", []byte(budgetYAML))
	writeFile(t, dir, "models/cam.onnx", convModel(t, 8))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "baseline")
	writeFile(t, dir, "models/cam.onnx", convModel(t, 200))
	git(t, dir, "add", "-A")
	git(t, dir, "commit", "-q", "-m", "wider")

	const token = "ghs_loadlineTestToken0123456789"
	var mu sync.Mutex
	var posted []string
	srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.Header.Get("Authorization") != "Bearer "+token {
			w.WriteHeader(http.StatusUnauthorized)
			return
		}
		w.Header().Set("Content-Type", "application/json")
		switch {
		case r.Method == "GET" && r.URL.Path == "/api/v3/repos/wrenfield/porch/issues/7/comments":
			fmt.Fprint(w, "[]")
		case r.Method == "POST" && r.URL.Path == "/api/v3/repos/wrenfield/porch/issues/7/comments":
			b, _ := io.ReadAll(r.Body)
			var in struct{ Body string }
			json.Unmarshal(b, &in)
			mu.Lock()
			posted = append(posted, in.Body)
			mu.Unlock()
			w.WriteHeader(http.StatusCreated)
			fmt.Fprint(w, `{"id":1,"html_url":"https://github.example/wrenfield/porch/pull/7#issuecomment-1"}`)
		default:
			t.Errorf("unexpected request %s %s", r.Method, r.URL.Path)
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
	code, out, errs := inDir(t, dir, "check", "--base", "HEAD~1", "--post", "--format", "markdown")
	if code != exitBudget {
		t.Fatalf("exit %d, want %d (the verdict, unchanged by posting)\n%s", code, exitBudget, errs)
	}
	if len(posted) != 1 || !strings.HasPrefix(posted[0], "<!-- loadline:budget-report -->") || !strings.Contains(posted[0], "models/cam.onnx") {
		t.Fatalf("comments posted: %q", posted)
	}
	s, err := os.ReadFile(summary)
	if err != nil || !strings.Contains(string(s), "models/cam.onnx") {
		t.Errorf("job summary: %v %q", err, s)
	}
	if !strings.Contains(out, "::error file=models/cam.onnx") {
		t.Errorf("no error annotation on the model file in stdout:\n%s", out)
	}
	if strings.Contains(out+errs, token) {
		t.Error("the token appears in the output")
	}
}
