package action

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/loadline/loadline/budget"
)

// fakeGitLab implements the merge-request notes endpoints as GitLab's REST
// API documents them (/projects/:id/merge_requests/:iid/notes), with its
// pagination headers (X-Page, X-Next-Page, X-Total-Pages).
type fakeGitLab struct {
	t      *testing.T
	srv    *httptest.Server
	rec    recorder
	header string // the token header expected

	mu     sync.Mutex
	notes  []gitlabNote
	nextID int64
	before func(w http.ResponseWriter, r *http.Request, n int) bool
	calls  int
	// user is who the token is (GET /user); nil makes GET /user refuse,
	// as it does for a job token.
	user *gitlabUser
	// author writes the notes the token adds; default user.
	author *gitlabUser
}

// writer is the author of the notes the token adds.
func (f *fakeGitLab) writer() *gitlabUser {
	if f.author != nil {
		return f.author
	}
	return f.user
}

// glProject is the project's full path, URL-encoded as the API wants it.
const glNotes = "/api/v4/projects/birds%2Fporch-cam/merge_requests/9/notes"

func newFakeGitLab(t *testing.T, header string) *fakeGitLab {
	f := &fakeGitLab{t: t, header: header, nextID: 500, user: &gitlabUser{ID: 77, Username: "project_12_bot"}}
	f.srv = httptest.NewServer(http.HandlerFunc(f.serve))
	t.Cleanup(f.srv.Close)
	return f
}

func (f *fakeGitLab) serve(w http.ResponseWriter, r *http.Request) {
	if r.Header.Get(f.header) != testToken {
		w.WriteHeader(http.StatusUnauthorized)
		fmt.Fprint(w, `{"message":"401 Unauthorized"}`)
		return
	}
	f.mu.Lock()
	f.calls++
	n, before := f.calls, f.before
	f.mu.Unlock()
	if before != nil && before(w, r, n) {
		f.rec.add(r, f.header)
		return
	}
	rq := f.rec.add(r, f.header)
	path := r.URL.EscapedPath()
	w.Header().Set("Content-Type", "application/json")
	switch {
	case r.Method == "GET" && path == "/api/v4/user":
		if f.user == nil {
			w.WriteHeader(http.StatusForbidden)
			fmt.Fprint(w, `{"message":"403 Forbidden"}`)
			return
		}
		json.NewEncoder(w).Encode(f.user)
	case r.Method == "GET" && path == glNotes:
		q := r.URL.Query()
		perPage, _ := strconv.Atoi(q.Get("per_page"))
		page, _ := strconv.Atoi(q.Get("page"))
		if perPage <= 0 || perPage > 100 || page <= 0 {
			w.WriteHeader(http.StatusBadRequest)
			return
		}
		f.mu.Lock()
		all := append([]gitlabNote(nil), f.notes...)
		f.mu.Unlock()
		lo, hi := min((page-1)*perPage, len(all)), min(page*perPage, len(all))
		total := max((len(all)+perPage-1)/perPage, 1)
		w.Header().Set("X-Page", strconv.Itoa(page))
		w.Header().Set("X-Total-Pages", strconv.Itoa(total))
		if page < total {
			w.Header().Set("X-Next-Page", strconv.Itoa(page+1))
		} else {
			w.Header().Set("X-Next-Page", "")
		}
		json.NewEncoder(w).Encode(all[lo:hi])
	case r.Method == "POST" && path == glNotes:
		var in gitlabNote
		if json.Unmarshal([]byte(rq.Body), &in) != nil || in.Body == "" || r.Header.Get("Content-Type") != "application/json" {
			w.WriteHeader(http.StatusBadRequest)
			return
		}
		f.mu.Lock()
		f.nextID++
		note := gitlabNote{ID: f.nextID, Body: in.Body, Author: f.writer()}
		f.notes = append(f.notes, note)
		f.mu.Unlock()
		w.WriteHeader(http.StatusCreated)
		json.NewEncoder(w).Encode(note)
	case r.Method == "PUT" && strings.HasPrefix(path, glNotes+"/"):
		id, _ := strconv.ParseInt(strings.TrimPrefix(path, glNotes+"/"), 10, 64)
		var in gitlabNote
		json.Unmarshal([]byte(rq.Body), &in)
		f.mu.Lock()
		defer f.mu.Unlock()
		for i := range f.notes {
			if f.notes[i].ID == id {
				f.notes[i].Body = in.Body
				json.NewEncoder(w).Encode(f.notes[i])
				return
			}
		}
		w.WriteHeader(http.StatusNotFound)
	default:
		w.WriteHeader(http.StatusNotFound)
		fmt.Fprint(w, `{"error":"404 Not Found"}`)
	}
}

// seed adds notes by someone else.
func (f *fakeGitLab) seed(bodies ...string) {
	f.seedBy(&gitlabUser{ID: 5, Username: "reviewer"}, bodies...)
}

// seedBy adds notes by u (nil: no author given).
func (f *fakeGitLab) seedBy(u *gitlabUser, bodies ...string) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for _, b := range bodies {
		f.nextID++
		f.notes = append(f.notes, gitlabNote{ID: f.nextID, Body: b, Author: u})
	}
}

func (f *fakeGitLab) snapshot() []gitlabNote {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]gitlabNote(nil), f.notes...)
}

type glSetup struct {
	gl    *GitLab
	clock *fakeClock
	out   captured
}

func newGLSetup(t *testing.T, f *fakeGitLab, vars map[string]string) *glSetup {
	env := map[string]string{
		"GITLAB_CI":                   "true",
		"CI_API_V4_URL":               f.srv.URL + "/api/v4",
		"CI_PROJECT_ID":               "birds/porch-cam",
		"CI_MERGE_REQUEST_PROJECT_ID": "birds/porch-cam",
		"CI_MERGE_REQUEST_IID":        "9",
		"LOADLINE_GITLAB_TOKEN":       testToken,
		"CI_JOB_TOKEN":                "job-token-not-used",
	}
	for k, v := range vars {
		if v == "" {
			delete(env, k)
		} else {
			env[k] = v
		}
	}
	e, err := GitLabEnvFrom(func(k string) string { return env[k] })
	if err != nil {
		t.Fatal(err)
	}
	s := &glSetup{clock: newFakeClock()}
	s.gl = &GitLab{Env: e, Comment: true, Retry: s.clock.retry()}
	t.Cleanup(func() {
		for _, rq := range f.rec.all() {
			s.out.WriteString(rq.Body)
		}
		noToken(t, s.out.String())
	})
	return s
}

func (s *glSetup) post(t *testing.T, body string) ([]string, error) {
	t.Helper()
	w, err := s.gl.Post(context.Background(), body, &budget.Result{Verdict: budget.Fail})
	s.out.add(w, err)
	return w, err
}

func TestGitLabCreatesThenEdits(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	f.seed("Looks fine to me")
	s := newGLSetup(t, f, nil)

	if w, err := s.post(t, "## loadline: over budget\n"); err != nil || len(w) != 0 {
		t.Fatalf("first run: warnings %q, error %v", w, err)
	}
	reqs := f.rec.take()
	if len(reqs) != 2 {
		t.Fatalf("first run: %d requests, want list + create: %+v", len(reqs), reqs)
	}
	checkRequest(t, reqs[0], "GET", glNotes)
	if reqs[0].Query != "per_page=100&page=1&sort=asc&order_by=created_at" {
		t.Fatalf("list query %q", reqs[0].Query)
	}
	checkRequest(t, reqs[1], "POST", glNotes)
	wantBody(t, reqs[1], Marker+"\n## loadline: over budget\n")

	if w, err := s.post(t, "## loadline: within budget\n"); err != nil || len(w) != 0 {
		t.Fatalf("second run: warnings %q, error %v", w, err)
	}
	reqs = f.rec.take()
	if len(reqs) != 3 {
		t.Fatalf("second run: %d requests, want list + GET /user + edit: %+v", len(reqs), reqs)
	}
	checkRequest(t, reqs[0], "GET", glNotes)
	checkRequest(t, reqs[1], "GET", "/api/v4/user")
	checkRequest(t, reqs[2], "PUT", glNotes+"/502")
	wantBody(t, reqs[2], Marker+"\n## loadline: within budget\n")
	if notes := f.snapshot(); len(notes) != 2 || notes[1].Body != Marker+"\n## loadline: within budget\n" {
		t.Fatalf("notes after two runs: %+v", notes)
	}
}

func TestGitLabMarkerOnLaterPage(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	var others []string
	for i := range 205 {
		others = append(others, fmt.Sprintf("note %d", i))
	}
	f.seed(others...)
	f.seedBy(f.user, Marker+"\nold")
	s := newGLSetup(t, f, nil)
	// A system note ("added 1 commit") carrying the marker is not ours.
	f.mu.Lock()
	f.notes[3] = gitlabNote{ID: f.notes[3].ID, Body: Marker, System: true}
	f.mu.Unlock()

	if _, err := s.post(t, "new"); err != nil {
		t.Fatal(err)
	}
	reqs := f.rec.take()
	if len(reqs) != 5 {
		t.Fatalf("%d requests, want 3 pages + GET /user + edit: %+v", len(reqs), reqs)
	}
	checkRequest(t, reqs[3], "GET", "/api/v4/user")
	reqs = append(reqs[:3], reqs[4])
	for i := range 3 {
		checkRequest(t, reqs[i], "GET", glNotes)
		if want := fmt.Sprintf("per_page=100&page=%d&sort=asc&order_by=created_at", i+1); reqs[i].Query != want {
			t.Fatalf("page %d query %q, want %q", i+1, reqs[i].Query, want)
		}
	}
	checkRequest(t, reqs[3], "PUT", glNotes+"/706")
	wantBody(t, reqs[3], Marker+"\nnew")
}

func TestGitLabRetriesServerError(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		if n == 1 {
			w.WriteHeader(http.StatusInternalServerError)
			fmt.Fprint(w, `{"message":"500 Internal Server Error"}`)
			return true
		}
		return false
	}
	s := newGLSetup(t, f, nil)
	if _, err := s.post(t, "report"); err != nil {
		t.Fatal(err)
	}
	if got := s.clock.Sleeps(); fmt.Sprint(got) != "[1s]" {
		t.Fatalf("waits %v, want [1s]", got)
	}
	reqs := f.rec.take()
	if len(reqs) != 3 || reqs[0].Method != "GET" || reqs[1].Method != "GET" || reqs[2].Method != "POST" {
		t.Fatalf("requests %+v", reqs)
	}
}

func TestGitLabRateLimit(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	var s *glSetup
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		if r.Method == "POST" && n == 2 {
			// GitLab's rate-limit headers: RateLimit-Reset is a Unix time.
			w.Header().Set("RateLimit-Remaining", "0")
			w.Header().Set("RateLimit-Reset", strconv.FormatInt(s.clock.Now().Add(12*time.Second).Unix(), 10))
			w.WriteHeader(http.StatusTooManyRequests)
			fmt.Fprint(w, "Retry later")
			return true
		}
		return false
	}
	s = newGLSetup(t, f, nil)
	if _, err := s.post(t, "report"); err != nil {
		t.Fatal(err)
	}
	if got := s.clock.Sleeps(); fmt.Sprint(got) != "[13s]" {
		t.Fatalf("waits %v, want [13s]", got)
	}
	if notes := f.snapshot(); len(notes) != 1 {
		t.Fatalf("%d notes, want 1", len(notes))
	}

	// A reset past the bound: no wait, an error.
	f2 := newFakeGitLab(t, "PRIVATE-TOKEN")
	var s2 *glSetup
	f2.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		w.Header().Set("Retry-After", "3600")
		w.WriteHeader(http.StatusTooManyRequests)
		return true
	}
	s2 = newGLSetup(t, f2, nil)
	_, err := s2.post(t, "report")
	var ge *GitLabError
	if !errors.As(err, &ge) || ge.StatusCode != http.StatusTooManyRequests {
		t.Fatalf("error %v, want the 429", err)
	}
	if len(s2.clock.Sleeps()) != 0 {
		t.Fatalf("waited %v past the bound", s2.clock.Sleeps())
	}
}

func TestGitLabJobTokenForbidden(t *testing.T) {
	f := newFakeGitLab(t, "JOB-TOKEN")
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		if r.Method == "POST" {
			w.WriteHeader(http.StatusForbidden)
			fmt.Fprint(w, `{"message":"403 Forbidden"}`)
			return true
		}
		return false
	}
	s := newGLSetup(t, f, map[string]string{"LOADLINE_GITLAB_TOKEN": "", "CI_JOB_TOKEN": testToken})
	if s.gl.Env.TokenHeader != "JOB-TOKEN" {
		t.Fatalf("token header %q", s.gl.Env.TokenHeader)
	}
	w, err := s.post(t, "report")
	// A refusal is a warning, not a failure to reach the API; the note was
	// not posted, which --post-required turns into exit 3.
	if !errors.Is(err, ErrNothingPosted) {
		t.Fatalf("error %v, want only %v", err, ErrNothingPosted)
	}
	if len(w) != 1 || !strings.Contains(w[0], "CI_JOB_TOKEN") || !strings.Contains(w[0], "HTTP 403") {
		t.Fatalf("warnings %q", w)
	}
	if reqs := f.rec.take(); len(reqs) != 2 || reqs[1].Auth == "" {
		t.Fatalf("requests %+v, want list + one create, not retried", reqs)
	}
}

func TestGitLabTimeout(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	release := make(chan struct{})
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		select {
		case <-r.Context().Done():
		case <-release:
		}
		return true
	}
	t.Cleanup(func() { close(release) })
	s := newGLSetup(t, f, nil)
	// No time is asserted: the error must name the request's timeout of
	// 150ms, the shorter bound, not the posting deadline.
	s.gl.Retry.Timeout = 150 * time.Millisecond
	// (A timeout that no longer worked would leave the call waiting on the
	// stalled server until go test's -timeout ends the run: a failure.)
	s.gl.Retry.Deadline = time.Hour
	_, err := s.post(t, "report")
	var te *TimeoutError
	if !errors.As(err, &te) || te.After != 150*time.Millisecond || !errors.Is(err, context.DeadlineExceeded) ||
		!strings.Contains(err.Error(), "no complete answer within 150ms") || strings.Contains(err.Error(), "deadline of") {
		t.Fatalf("error %v, want the request's timeout", err)
	}
}

func TestGitLabTokenRedacted(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		w.WriteHeader(http.StatusBadRequest)
		fmt.Fprintf(w, `{"message":{"token":["%s is malformed"]}}`, r.Header.Get("PRIVATE-TOKEN"))
		return true
	}
	s := newGLSetup(t, f, nil)
	_, err := s.post(t, "report")
	if err == nil || !strings.Contains(err.Error(), "[redacted] is malformed") {
		t.Fatalf("error %v, want the echoed token redacted", err)
	}
}

func TestGitLabLongNoteCut(t *testing.T) {
	f := newFakeGitLab(t, "PRIVATE-TOKEN")
	s := newGLSetup(t, f, nil)
	body := table(25_000)
	if _, err := s.post(t, body); err != nil {
		t.Fatal(err)
	}
	n := f.snapshot()[0]
	if len([]rune(n.Body)) > GitLabNoteLimit || !strings.HasSuffix(n.Body, "more lines not shown: see the job log\n") {
		t.Fatalf("note of %d characters ends %q", len([]rune(n.Body)), n.Body[len(n.Body)-60:])
	}
}

func TestGitLabEnv(t *testing.T) {
	env := map[string]string{
		"CI_API_V4_URL": "https://gitlab.example/api/v4", "CI_PROJECT_ID": "77", "CI_MERGE_REQUEST_PROJECT_ID": "12",
		"CI_MERGE_REQUEST_SOURCE_PROJECT_ID": "77", "CI_MERGE_REQUEST_IID": "4", "GITLAB_TOKEN": testToken,
		"CI_MERGE_REQUEST_TARGET_BRANCH_NAME": "main", "CI_MERGE_REQUEST_DIFF_BASE_SHA": "abc",
	}
	e, err := GitLabEnvFrom(func(k string) string { return env[k] })
	if err != nil {
		t.Fatal(err)
	}
	if e.ProjectID != "12" || !e.Fork || e.MRIID != 4 || e.TokenHeader != "PRIVATE-TOKEN" || e.TargetBranch != "main" || e.DiffBaseSHA != "abc" {
		t.Fatalf("env %+v", e)
	}
	env["CI_MERGE_REQUEST_IID"] = "four"
	if _, err := GitLabEnvFrom(func(k string) string { return env[k] }); err == nil {
		t.Fatal("no error for a bad CI_MERGE_REQUEST_IID")
	}
	g := &GitLab{Comment: true}
	if w, err := g.Post(context.Background(), "x", nil); !errors.Is(err, ErrNothingPosted) || len(w) != 1 || !strings.Contains(w[0], "not a merge request pipeline") {
		t.Fatalf("outside a merge request: %q, %v", w, err)
	}
}
