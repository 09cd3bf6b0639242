package action

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/loadline/loadline/budget"
)

// ghPrefix is where the fake server serves the API, as GitHub Enterprise
// Server does (GITHUB_API_URL=https://HOST/api/v3): every test goes through
// a self-hosted API URL.
const ghPrefix = "/api/v3"

// fakeGitHub implements the endpoints loadline uses, as GitHub documents
// them: list, create and edit issue comments, create a commit status.
type fakeGitHub struct {
	t   *testing.T
	srv *httptest.Server
	rec recorder

	mu       sync.Mutex
	comments []ghComment
	nextID   int64
	statuses []map[string]any
	// before, when set, may answer a request instead of the fake; it
	// returns true when it did.
	before func(w http.ResponseWriter, r *http.Request, n int) bool
	calls  int
	// userLogin, when set, makes the token a personal one: GET /user
	// answers it. appLogin, when set, makes it a GitHub App's installation
	// token: GET /user is refused and GraphQL's viewer answers it. With
	// neither the token is the Actions job's: both are refused, and the
	// comments it writes are the Actions bot's.
	userLogin, appLogin string
}

type ghUser struct {
	Login string `json:"login"`
	Type  string `json:"type,omitempty"`
}

type ghComment struct {
	ID      int64   `json:"id"`
	Body    string  `json:"body"`
	HTMLURL string  `json:"html_url"`
	User    *ghUser `json:"user,omitempty"`
}

// self is the author of the comments the token writes.
func (f *fakeGitHub) self() *ghUser {
	switch {
	case f.userLogin != "":
		return &ghUser{Login: f.userLogin, Type: "User"}
	case f.appLogin != "":
		return &ghUser{Login: f.appLogin, Type: "Bot"}
	}
	return &ghUser{Login: "github-actions[bot]", Type: "Bot"}
}

// refuseIntegration answers as GitHub does when an installation token asks
// for something only a user may.
func refuseIntegration(w http.ResponseWriter) {
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(http.StatusForbidden)
	fmt.Fprint(w, `{"message":"Resource not accessible by integration"}`)
}

func newFakeGitHub(t *testing.T) *fakeGitHub {
	f := &fakeGitHub{t: t, nextID: 1000}
	mux := http.NewServeMux()
	mux.HandleFunc("GET "+ghPrefix+"/repos/{owner}/{repo}/issues/{n}/comments", f.list)
	mux.HandleFunc("POST "+ghPrefix+"/repos/{owner}/{repo}/issues/{n}/comments", f.create)
	mux.HandleFunc("PATCH "+ghPrefix+"/repos/{owner}/{repo}/issues/comments/{id}", f.edit)
	mux.HandleFunc("POST "+ghPrefix+"/repos/{owner}/{repo}/statuses/{sha}", f.status)
	mux.HandleFunc("GET "+ghPrefix+"/user", func(w http.ResponseWriter, r *http.Request) {
		f.rec.add(r, "Authorization")
		if f.userLogin == "" {
			refuseIntegration(w)
			return
		}
		json.NewEncoder(w).Encode(ghUser{Login: f.userLogin, Type: "User"})
	})
	// GitHub Enterprise Server serves GraphQL at /api/graphql beside /api/v3.
	mux.HandleFunc("POST /api/graphql", func(w http.ResponseWriter, r *http.Request) {
		rq := f.rec.add(r, "Authorization")
		if f.appLogin == "" || !strings.Contains(rq.Body, "viewer") {
			refuseIntegration(w)
			return
		}
		fmt.Fprintf(w, `{"data":{"viewer":{"login":%q}}}`, f.appLogin)
	})
	f.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if r.Header.Get("Authorization") != "Bearer "+testToken {
			w.WriteHeader(http.StatusUnauthorized)
			fmt.Fprint(w, `{"message":"Bad credentials"}`)
			return
		}
		f.mu.Lock()
		f.calls++
		n := f.calls
		before := f.before
		f.mu.Unlock()
		if before != nil && before(w, r, n) {
			f.rec.add(r, "Authorization")
			return
		}
		mux.ServeHTTP(w, r)
	}))
	t.Cleanup(f.srv.Close)
	return f
}

// seed adds comments written by someone else (a person, "reviewer").
func (f *fakeGitHub) seed(bodies ...string) {
	f.seedBy(&ghUser{Login: "reviewer", Type: "User"}, bodies...)
}

// seedOurs adds comments written by the token's own identity.
func (f *fakeGitHub) seedOurs(bodies ...string) {
	f.seedBy(f.self(), bodies...)
}

// seedBy adds comments written by u (nil: no author given).
func (f *fakeGitHub) seedBy(u *ghUser, bodies ...string) {
	f.mu.Lock()
	defer f.mu.Unlock()
	for _, b := range bodies {
		f.nextID++
		f.comments = append(f.comments, ghComment{ID: f.nextID, Body: b, User: u})
	}
}

func (f *fakeGitHub) list(w http.ResponseWriter, r *http.Request) {
	f.rec.add(r, "Authorization")
	q := r.URL.Query()
	perPage, _ := strconv.Atoi(q.Get("per_page"))
	if perPage <= 0 || perPage > 100 {
		perPage = 30
	}
	page, _ := strconv.Atoi(q.Get("page"))
	if page <= 0 {
		page = 1
	}
	f.mu.Lock()
	all := append([]ghComment(nil), f.comments...)
	f.mu.Unlock()
	lo, hi := min((page-1)*perPage, len(all)), min(page*perPage, len(all))
	last := max((len(all)+perPage-1)/perPage, 1)
	if page < last {
		// The Link header as GitHub sends it (RFC 8288).
		link := func(p int) string {
			return fmt.Sprintf("<%s%s?page=%d&per_page=%d>", f.srv.URL, r.URL.Path, p, perPage)
		}
		w.Header().Set("Link", link(page+1)+`; rel="next", `+link(last)+`; rel="last"`)
	}
	w.Header().Set("Content-Type", "application/json")
	json.NewEncoder(w).Encode(all[lo:hi])
}

func (f *fakeGitHub) create(w http.ResponseWriter, r *http.Request) {
	rq := f.rec.add(r, "Authorization")
	var in ghComment
	if err := json.Unmarshal([]byte(rq.Body), &in); err != nil || in.Body == "" {
		w.WriteHeader(http.StatusUnprocessableEntity)
		return
	}
	f.mu.Lock()
	f.nextID++
	c := ghComment{ID: f.nextID, Body: in.Body, HTMLURL: fmt.Sprintf("https://github.example/o/r/pull/%s#issuecomment-%d", r.PathValue("n"), f.nextID), User: f.self()}
	f.comments = append(f.comments, c)
	f.mu.Unlock()
	w.WriteHeader(http.StatusCreated)
	json.NewEncoder(w).Encode(c)
}

func (f *fakeGitHub) edit(w http.ResponseWriter, r *http.Request) {
	rq := f.rec.add(r, "Authorization")
	id, _ := strconv.ParseInt(r.PathValue("id"), 10, 64)
	var in ghComment
	json.Unmarshal([]byte(rq.Body), &in)
	f.mu.Lock()
	defer f.mu.Unlock()
	for i := range f.comments {
		if f.comments[i].ID == id {
			f.comments[i].Body = in.Body
			f.comments[i].HTMLURL = fmt.Sprintf("https://github.example/o/r/pull/7#issuecomment-%d", id)
			json.NewEncoder(w).Encode(f.comments[i])
			return
		}
	}
	w.WriteHeader(http.StatusNotFound)
}

func (f *fakeGitHub) status(w http.ResponseWriter, r *http.Request) {
	rq := f.rec.add(r, "Authorization")
	var in map[string]any
	json.Unmarshal([]byte(rq.Body), &in)
	f.mu.Lock()
	f.statuses = append(f.statuses, in)
	f.mu.Unlock()
	w.WriteHeader(http.StatusCreated)
	json.NewEncoder(w).Encode(in)
}

func (f *fakeGitHub) snapshot() []ghComment {
	f.mu.Lock()
	defer f.mu.Unlock()
	return append([]ghComment(nil), f.comments...)
}

// ghSetup is one test's environment: a payload file, summary and output
// files, the poster.
type ghSetup struct {
	dir     string
	summary string
	output  string
	annot   bytes.Buffer
	clock   *fakeClock
	gh      *GitHub
	out     captured
}

func newGHSetup(t *testing.T, f *fakeGitHub, fork bool) *ghSetup {
	s := &ghSetup{dir: t.TempDir(), clock: newFakeClock()}
	head := "loadline/porch"
	if fork {
		head = "someone/porch"
	}
	payload := fmt.Sprintf(`{"action":"synchronize","number":7,"pull_request":{"number":7,
		"head":{"ref":"shrink","sha":"1111111111111111111111111111111111111111","repo":{"full_name":%q}},
		"base":{"ref":"main","sha":"2222222222222222222222222222222222222222","repo":{"full_name":"loadline/porch"}}}}`, head)
	env := map[string]string{
		"GITHUB_ACTIONS":      "true",
		"GITHUB_REPOSITORY":   "loadline/porch",
		"GITHUB_API_URL":      f.srv.URL + ghPrefix,
		"GITHUB_SERVER_URL":   "https://github.example",
		"GITHUB_RUN_ID":       "42",
		"GITHUB_TOKEN":        testToken,
		"GITHUB_EVENT_NAME":   "pull_request",
		"GITHUB_EVENT_PATH":   writeFile(t, s.dir, "event.json", payload),
		"GITHUB_SHA":          "3333333333333333333333333333333333333333",
		"GITHUB_STEP_SUMMARY": filepath.Join(s.dir, "summary.md"),
		"GITHUB_OUTPUT":       filepath.Join(s.dir, "output"),
	}
	s.summary, s.output = env["GITHUB_STEP_SUMMARY"], env["GITHUB_OUTPUT"]
	e, err := GitHubEnvFrom(func(k string) string { return env[k] })
	if err != nil {
		t.Fatal(err)
	}
	s.gh = NewGitHub(e, &s.annot)
	s.gh.Retry = s.clock.retry()
	t.Cleanup(func() {
		s.out.WriteString(s.annot.String())
		s.out.addFile(t, s.summary)
		s.out.addFile(t, s.output)
		for _, rq := range f.rec.all() {
			s.out.WriteString(rq.Body)
		}
		noToken(t, s.out.String())
	})
	return s
}

func (s *ghSetup) post(t *testing.T, body string, res *budget.Result) ([]string, error) {
	t.Helper()
	w, err := s.gh.Post(context.Background(), body, res)
	s.out.add(w, err)
	return w, err
}

func checkRequest(t *testing.T, got request, method, path string) {
	t.Helper()
	if got.Method != method || got.Path != path {
		t.Fatalf("request %s %s, want %s %s", got.Method, got.Path, method, path)
	}
	if got.Auth == "" {
		t.Fatalf("%s %s: no token header", method, path)
	}
}

func wantBody(t *testing.T, rq request, want string) {
	t.Helper()
	var in struct {
		Body string `json:"body"`
	}
	if err := json.Unmarshal([]byte(rq.Body), &in); err != nil {
		t.Fatalf("%s %s: body is not JSON: %v", rq.Method, rq.Path, err)
	}
	if in.Body != want {
		t.Fatalf("%s %s: body\n%q\nwant\n%q", rq.Method, rq.Path, in.Body, want)
	}
}

const commentsPath = ghPrefix + "/repos/loadline/porch/issues/7/comments"

func TestGitHubCreatesThenEdits(t *testing.T) {
	f := newFakeGitHub(t)
	f.seed("LGTM", "please shrink the arena")
	s := newGHSetup(t, f, false)

	w, err := s.post(t, "## loadline: 1 model over budget\n", failingResult())
	if err != nil || len(w) != 0 {
		t.Fatalf("first run: warnings %q, error %v", w, err)
	}
	reqs := f.rec.take()
	if len(reqs) != 2 {
		t.Fatalf("first run made %d requests, want list + create: %+v", len(reqs), reqs)
	}
	checkRequest(t, reqs[0], "GET", commentsPath)
	if reqs[0].Query != "per_page=100" {
		t.Fatalf("list query %q, want per_page=100", reqs[0].Query)
	}
	checkRequest(t, reqs[1], "POST", commentsPath)
	wantBody(t, reqs[1], Marker+"\n## loadline: 1 model over budget\n")

	w, err = s.post(t, "## loadline: within budget\n", &budget.Result{Verdict: budget.Pass})
	if err != nil || len(w) != 0 {
		t.Fatalf("second run: warnings %q, error %v", w, err)
	}
	reqs = f.rec.take()
	// The job's token is an installation token: GET /user and GraphQL's
	// viewer both refuse it, and the comment is the Actions bot's.
	if len(reqs) != 4 {
		t.Fatalf("second run made %d requests, want list + who-am-I (REST, GraphQL) + edit: %+v", len(reqs), reqs)
	}
	checkRequest(t, reqs[0], "GET", commentsPath)
	checkRequest(t, reqs[1], "GET", ghPrefix+"/user")
	checkRequest(t, reqs[2], "POST", "/api/graphql")
	checkRequest(t, reqs[3], "PATCH", ghPrefix+"/repos/loadline/porch/issues/comments/1003")
	wantBody(t, reqs[3], Marker+"\n## loadline: within budget\n")

	cs := f.snapshot()
	if len(cs) != 3 {
		t.Fatalf("%d comments after two runs, want the 2 others and ours", len(cs))
	}
	if cs[2].Body != Marker+"\n## loadline: within budget\n" {
		t.Fatalf("our comment holds %q", cs[2].Body)
	}

	// The job summary: appended, once per run, as markdown.
	summary, _ := os.ReadFile(s.summary)
	if want := "## loadline: 1 model over budget\n## loadline: within budget\n"; string(summary) != want {
		t.Fatalf("job summary\n%q\nwant\n%q", summary, want)
	}
	outputs, _ := os.ReadFile(s.output)
	if want := "verdict=fail\ncomment-url=https://github.example/o/r/pull/7#issuecomment-1003\n" +
		"verdict=pass\ncomment-url=https://github.example/o/r/pull/7#issuecomment-1003\n"; string(outputs) != want {
		t.Fatalf("step outputs\n%q\nwant\n%q", outputs, want)
	}
}

func TestGitHubAnnotationsExactText(t *testing.T) {
	f := newFakeGitHub(t)
	s := newGHSetup(t, f, false)
	if _, err := s.post(t, "report\n", failingResult()); err != nil {
		t.Fatal(err)
	}
	// The workflow command syntax GitHub documents: ::LEVEL file=F,title=T::MESSAGE,
	// with %, CR and LF escaped in the message, and also : and , in properties.
	want := "::error file=models/birdcam/v4%2Cint8%3Aa.onnx,title=loadline%3A fail (ram%2C macs)::" +
		"fail ram: 586 KiB over the 461 KiB limit (90%25 of 512 KiB)%0Awarn macs: 58M, 97%25 of 60M\n" +
		"::warning file=models/kws.onnx,title=loadline%3A warn (arena)::warn arena: 95 (limit 100) (base 90)\n" +
		"::error file=models/broken.onnx,title=loadline%3A cannot measure::cannot measure: truncated at byte 812\n"
	if got := s.annot.String(); got != want {
		t.Fatalf("annotations\n%s\nwant\n%s", got, want)
	}
}

func TestAnnotationEscapes(t *testing.T) {
	a := Annotation{Level: "warning", File: "a,b:c%d", Title: "t\r\n", Message: "50% up\r\nnext: a,b"}
	want := "::warning file=a%2Cb%3Ac%25d,title=t%0D%0A::50%25 up%0D%0Anext: a,b"
	if got := a.String(); got != want {
		t.Fatalf("got  %s\nwant %s", got, want)
	}
}

func TestGitHubMarkerOnLaterPage(t *testing.T) {
	f := newFakeGitHub(t)
	var others []string
	for i := range 230 {
		others = append(others, fmt.Sprintf("comment %d", i))
	}
	// A reply quoting our marker is not ours: the marker must be the first line.
	others[5] = "> quoting\n" + Marker
	f.userLogin = "release-bot" // a personal token: GET /user answers
	f.seed(others...)
	f.seedOurs(Marker + "\nold report")
	f.seed("later comment")
	s := newGHSetup(t, f, false)

	if _, err := s.post(t, "new report", &budget.Result{Verdict: budget.Pass}); err != nil {
		t.Fatal(err)
	}
	reqs := f.rec.take()
	if len(reqs) != 5 {
		t.Fatalf("%d requests, want 3 pages + GET /user + edit: %+v", len(reqs), reqs)
	}
	// The quoted marker on page 1 is no candidate: the identity is asked
	// for on page 3, where our comment is.
	checkRequest(t, reqs[3], "GET", ghPrefix+"/user")
	reqs = append(reqs[:3], reqs[4])
	for i, q := range []string{"per_page=100", "page=2&per_page=100", "page=3&per_page=100"} {
		checkRequest(t, reqs[i], "GET", commentsPath)
		if reqs[i].Query != q {
			t.Fatalf("page %d query %q, want %q", i+1, reqs[i].Query, q)
		}
	}
	checkRequest(t, reqs[3], "PATCH", ghPrefix+"/repos/loadline/porch/issues/comments/1231")
	wantBody(t, reqs[3], Marker+"\nnew report")
	if cs := f.snapshot(); len(cs) != 232 {
		t.Fatalf("%d comments, want 232 (no new one)", len(cs))
	}
}

func TestGitHubRetriesServerError(t *testing.T) {
	f := newFakeGitHub(t)
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		if r.Method == "POST" && n <= 3 { // the list is call 1; fail the first two creates
			w.WriteHeader(http.StatusBadGateway)
			fmt.Fprint(w, `{"message":"Server Error"}`)
			return true
		}
		return false
	}
	s := newGHSetup(t, f, false)
	if _, err := s.post(t, "report", &budget.Result{Verdict: budget.Pass}); err != nil {
		t.Fatal(err)
	}
	reqs := f.rec.take()
	if len(reqs) != 4 {
		t.Fatalf("%d requests, want list + 3 creates: %+v", len(reqs), reqs)
	}
	for _, rq := range reqs[1:] {
		checkRequest(t, rq, "POST", commentsPath)
		wantBody(t, rq, Marker+"\nreport") // the body is sent again, whole
	}
	if got, want := s.clock.Sleeps(), []time.Duration{time.Second, 2 * time.Second}; fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("waits %v, want exponential backoff %v", got, want)
	}
	if cs := f.snapshot(); len(cs) != 1 {
		t.Fatalf("%d comments, want 1", len(cs))
	}
}

func TestGitHubServerErrorGivesUp(t *testing.T) {
	f := newFakeGitHub(t)
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		w.WriteHeader(http.StatusServiceUnavailable)
		return true
	}
	s := newGHSetup(t, f, false)
	s.gh.Retry.Attempts = 3
	_, err := s.post(t, "report", failingResult())
	if err == nil || !strings.Contains(err.Error(), "503") {
		t.Fatalf("error %v, want the 503 after the retries", err)
	}
	if n := len(f.rec.take()); n != 3 {
		t.Fatalf("%d requests, want 3 attempts", n)
	}
	summary, _ := os.ReadFile(s.summary)
	if string(summary) != "report\n" {
		t.Fatalf("job summary %q not written before the API failed", summary)
	}
}

func TestGitHubRateLimitWaitsForReset(t *testing.T) {
	cases := []struct {
		name    string
		code    int
		headers func(now time.Time) map[string]string
		wait    time.Duration
	}{
		{"primary limit, 403", http.StatusForbidden, func(now time.Time) map[string]string {
			return map[string]string{"X-RateLimit-Remaining": "0", "X-RateLimit-Limit": "5000", "X-RateLimit-Reset": strconv.FormatInt(now.Add(7*time.Second).Unix(), 10)}
		}, 8 * time.Second}, // the reset is in whole seconds: one more
		{"primary limit, 429", http.StatusTooManyRequests, func(now time.Time) map[string]string {
			return map[string]string{"X-RateLimit-Remaining": "0", "X-RateLimit-Reset": strconv.FormatInt(now.Add(20*time.Second).Unix(), 10)}
		}, 21 * time.Second},
		{"secondary limit, Retry-After", http.StatusForbidden, func(time.Time) map[string]string {
			return map[string]string{"Retry-After": "3"}
		}, 3 * time.Second},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			f := newFakeGitHub(t)
			var s *ghSetup
			f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
				if n != 1 {
					return false
				}
				for k, v := range tc.headers(s.clock.Now()) {
					w.Header().Set(k, v)
				}
				w.WriteHeader(tc.code)
				fmt.Fprint(w, `{"message":"API rate limit exceeded","documentation_url":"https://docs.github.com/rest/overview/rate-limits-for-the-rest-api"}`)
				return true
			}
			s = newGHSetup(t, f, false)
			w, err := s.post(t, "report", &budget.Result{Verdict: budget.Pass})
			if err != nil || len(w) != 0 {
				t.Fatalf("warnings %q, error %v", w, err)
			}
			if got := s.clock.Sleeps(); len(got) != 1 || got[0] != tc.wait {
				t.Fatalf("waits %v, want one of %v", got, tc.wait)
			}
			reqs := f.rec.take()
			if len(reqs) != 3 || reqs[0].Method != "GET" || reqs[1].Method != "GET" || reqs[2].Method != "POST" {
				t.Fatalf("requests %+v, want list (limited), list, create", reqs)
			}
		})
	}
}

func TestGitHubRateLimitBounded(t *testing.T) {
	f := newFakeGitHub(t)
	var s *ghSetup
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		w.Header().Set("X-RateLimit-Remaining", "0")
		w.Header().Set("X-RateLimit-Reset", strconv.FormatInt(s.clock.Now().Add(time.Hour).Unix(), 10))
		w.WriteHeader(http.StatusForbidden)
		fmt.Fprint(w, `{"message":"API rate limit exceeded"}`)
		return true
	}
	s = newGHSetup(t, f, false)
	w, err := s.post(t, "report", failingResult())
	if err == nil || len(w) != 0 {
		t.Fatalf("a limit reset an hour away: warnings %q, error %v; want an error", w, err)
	}
	if got := s.clock.Sleeps(); len(got) != 0 {
		t.Fatalf("waited %v for a reset past the 60 s bound", got)
	}
	if !strings.Contains(err.Error(), "rate limit") {
		t.Fatalf("error %q does not say rate limit", err)
	}

	// Waits within the bound add up to at most MaxTotalWait.
	f2 := newFakeGitHub(t)
	var s2 *ghSetup
	f2.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		w.Header().Set("Retry-After", "25")
		w.WriteHeader(http.StatusTooManyRequests)
		return true
	}
	s2 = newGHSetup(t, f2, false)
	s2.gh.Retry.Attempts = 10
	if _, err := s2.post(t, "report", failingResult()); err == nil {
		t.Fatal("no error after the wait bound")
	}
	if got := s2.clock.Sleeps(); fmt.Sprint(got) != "[25s 25s]" {
		t.Fatalf("waits %v, want two of 25s within the 60s total", got)
	}
}

// TestRateLimitBeyondDurationIsNotRetriedAtOnce: a Retry-After or a
// rate-limit reset too far off for a time.Duration (found by
// FuzzRetryWait) is longer than any wait, so the call fails at once with
// the host's answer; it once wrapped around to a wait of 0 and spent every
// attempt at once.
func TestRateLimitBeyondDurationIsNotRetriedAtOnce(t *testing.T) {
	for _, tc := range []struct {
		name    string
		code    int
		headers map[string]string
	}{
		{"Retry-After of 2^63 ns and more", http.StatusTooManyRequests, map[string]string{"Retry-After": "9223372037"}},
		{"reset at the end of int64", http.StatusForbidden, map[string]string{"X-RateLimit-Remaining": "0", "X-RateLimit-Reset": "9223372036854775807"}},
		{"GitLab's reset at the end of int64", http.StatusTooManyRequests, map[string]string{"RateLimit-Remaining": "0", "RateLimit-Reset": "9223372036854775807"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			f := newFakeGitHub(t)
			f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
				for k, v := range tc.headers {
					w.Header().Set(k, v)
				}
				w.WriteHeader(tc.code)
				fmt.Fprint(w, `{"message":"API rate limit exceeded"}`)
				return true
			}
			s := newGHSetup(t, f, false)
			if _, err := s.post(t, "report", failingResult()); err == nil {
				t.Fatal("no error")
			}
			if got := s.clock.Sleeps(); len(got) != 0 {
				t.Fatalf("waited %v", got)
			}
			if n := len(f.rec.take()); n != 1 {
				t.Fatalf("%d requests, want 1", n)
			}
		})
	}
}

func TestGitHubForkCannotComment(t *testing.T) {
	f := newFakeGitHub(t)
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		if r.Method != "GET" {
			w.WriteHeader(http.StatusForbidden)
			fmt.Fprint(w, `{"message":"Resource not accessible by integration","documentation_url":"https://docs.github.com/rest/issues/comments#create-an-issue-comment"}`)
			return true
		}
		return false
	}
	s := newGHSetup(t, f, true)
	s.gh.Status = true
	res := failingResult()
	w, err := s.post(t, "## over budget\n", res)
	if err != nil {
		t.Fatalf("a fork's refusal is an error: %v", err)
	}
	if len(w) != 2 || !strings.Contains(w[0], "fork someone/porch") || !strings.Contains(w[0], "job summary") || !strings.Contains(w[1], "commit status") {
		t.Fatalf("warnings %q", w)
	}
	if res.Verdict != budget.Fail {
		t.Fatalf("verdict changed to %s", res.Verdict)
	}
	summary, _ := os.ReadFile(s.summary)
	if string(summary) != "## over budget\n" {
		t.Fatalf("job summary %q", summary)
	}
	if len(s.clock.Sleeps()) != 0 {
		t.Fatalf("a refusal was retried: %v", s.clock.Sleeps())
	}
	if reqs := f.rec.take(); len(reqs) != 3 {
		t.Fatalf("%d requests, want list, create, status", len(reqs))
	}
}

func TestGitHubTimeout(t *testing.T) {
	f := newFakeGitHub(t)
	release := make(chan struct{})
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		select { // answer nothing until the client gives up
		case <-r.Context().Done():
		case <-release:
		}
		return true
	}
	t.Cleanup(func() { close(release) }) // before the server closes (cleanups run last first)
	s := newGHSetup(t, f, false)
	// No time is asserted. The request's own timeout is the shorter of the
	// two bounds; the error says which one ended the call, and it must be
	// the request's (a TimeoutError of 200ms), not the posting deadline.
	s.gh.Retry.Timeout = 200 * time.Millisecond
	// (A timeout that no longer worked would leave the call waiting on the
	// stalled server until go test's -timeout ends the run: a failure.)
	s.gh.Retry.Deadline = time.Hour
	_, err := s.post(t, "report", failingResult())
	if err == nil {
		t.Fatal("no error from a server that never answers")
	}
	var te *TimeoutError
	if !errors.As(err, &te) || te.After != 200*time.Millisecond || !errors.Is(err, context.DeadlineExceeded) ||
		!strings.Contains(err.Error(), "no complete answer within 200ms") || strings.Contains(err.Error(), "deadline of") {
		t.Fatalf("error %q is not the request's timeout", err)
	}
}

func TestGitHubCommitStatus(t *testing.T) {
	f := newFakeGitHub(t)
	s := newGHSetup(t, f, false)
	s.gh.Status = true
	if _, err := s.post(t, "report", failingResult()); err != nil {
		t.Fatal(err)
	}
	reqs := f.rec.take()
	last := reqs[len(reqs)-1]
	checkRequest(t, last, "POST", ghPrefix+"/repos/loadline/porch/statuses/1111111111111111111111111111111111111111")
	var st map[string]string
	json.Unmarshal([]byte(last.Body), &st)
	want := map[string]string{
		"state": "failure", "context": "loadline",
		"description": "over budget: 4 models checked, 2 failing, 1 warning",
		"target_url":  "https://github.example/loadline/porch/actions/runs/42",
	}
	if fmt.Sprint(st) != fmt.Sprint(want) {
		t.Fatalf("status %v, want %v", st, want)
	}
	for _, tc := range []struct {
		v      budget.Status
		failOn string
		want   string
	}{
		{budget.Warn, "fail", "success"}, {budget.Warn, "warn", "failure"}, {budget.Fail, "never", "success"}, {budget.Pass, "warn", "success"},
	} {
		if got := statusState(tc.v, tc.failOn); got != tc.want {
			t.Errorf("statusState(%s, %s) = %s, want %s", tc.v, tc.failOn, got, tc.want)
		}
	}
	if got := truncateRunes(strings.Repeat("é", 200), 140); len([]rune(got)) != 140 || !strings.HasSuffix(got, "…") {
		t.Fatalf("truncateRunes: %d characters", len([]rune(got)))
	}
}

func TestGitHubTokenRedactedFromErrors(t *testing.T) {
	f := newFakeGitHub(t)
	f.before = func(w http.ResponseWriter, r *http.Request, n int) bool {
		// A proxy that echoes the credentials it was sent.
		w.WriteHeader(http.StatusNotFound)
		fmt.Fprintf(w, `{"message":"no such thing for %s"}`, r.Header.Get("Authorization"))
		return true
	}
	s := newGHSetup(t, f, false)
	_, err := s.post(t, "report", failingResult())
	if err == nil || !strings.Contains(err.Error(), "[redacted]") {
		t.Fatalf("error %v, want the echoed token redacted", err)
	}
}

func TestGitHubLongBodyCut(t *testing.T) {
	f := newFakeGitHub(t)
	s := newGHSetup(t, f, false)
	body := table(3000)
	if len(body) <= GitHubCommentLimit {
		t.Fatalf("test body too short: %d", len(body))
	}
	if _, err := s.post(t, body, failingResult()); err != nil {
		t.Fatal(err)
	}
	c := f.snapshot()[0]
	if n := len([]rune(c.Body)); n > GitHubCommentLimit {
		t.Fatalf("comment of %d characters", n)
	}
	if !strings.HasPrefix(c.Body, Marker+"\n## loadline\n") || !strings.HasSuffix(c.Body, "more lines not shown: see the job summary\n") {
		t.Fatalf("comment not cut cleanly: ends %q", c.Body[len(c.Body)-80:])
	}
	summary, _ := os.ReadFile(s.summary)
	if string(summary) != body {
		t.Fatal("the job summary is not the whole report")
	}
}

func TestGitHubNotAPullRequest(t *testing.T) {
	f := newFakeGitHub(t)
	s := newGHSetup(t, f, false)
	s.gh.Env.PullNumber = 0
	s.gh.Env.EventName = "push"
	w, err := s.post(t, "report", failingResult())
	if err != nil || len(w) != 1 || !strings.Contains(w[0], "push event is not a pull request") {
		t.Fatalf("warnings %q, error %v", w, err)
	}
	if n := len(f.rec.take()); n != 0 {
		t.Fatalf("%d API requests outside a pull request", n)
	}
}

func TestGitHubEnvFrom(t *testing.T) {
	dir := t.TempDir()
	payload := `{"pull_request":{"number":12,"head":{"sha":"abc","repo":{"full_name":"someone/porch"}},"base":{"ref":"release/2","sha":"def","repo":{"full_name":"loadline/porch"}}}}`
	env := map[string]string{
		"GITHUB_REPOSITORY": "loadline/porch", "GITHUB_EVENT_PATH": writeFile(t, dir, "e.json", payload),
		"GITHUB_API_URL": "https://ghe.example/api/v3", "GITHUB_TOKEN": testToken,
	}
	e, err := GitHubEnvFrom(func(k string) string { return env[k] })
	if err != nil {
		t.Fatal(err)
	}
	if e.PullNumber != 12 || e.HeadSHA != "abc" || e.BaseRef != "release/2" || e.BaseSHA != "def" || !e.Fork() ||
		e.Owner() != "loadline" || e.Repo() != "porch" || e.APIURL != "https://ghe.example/api/v3" || e.Token != testToken {
		t.Fatalf("env %+v", e)
	}
	env["GITHUB_EVENT_PATH"] = writeFile(t, dir, "push.json", `{"ref":"refs/heads/main"}`)
	delete(env, "GITHUB_API_URL")
	if e, err = GitHubEnvFrom(func(k string) string { return env[k] }); err != nil || e.PullNumber != 0 || e.Fork() || e.APIURL != "https://api.github.com" {
		t.Fatalf("push event: %+v, %v", e, err)
	}
	env["GITHUB_EVENT_PATH"] = writeFile(t, dir, "bad.json", `{"pull_request":`)
	if _, err = GitHubEnvFrom(func(k string) string { return env[k] }); err == nil {
		t.Fatal("no error for a malformed payload")
	}
}

func TestDetect(t *testing.T) {
	p, ok := Detect(func(k string) string {
		return map[string]string{"GITHUB_ACTIONS": "true", "LOADLINE_COMMIT_STATUS": "true", "LOADLINE_FAIL_ON": "warn", "LOADLINE_API_TIMEOUT": "3s"}[k]
	})
	if g, isGH := p.(*GitHub); !ok || !isGH || !g.Status || !g.Comment || g.FailOn != "warn" || g.Retry.Timeout != 3*time.Second || g.Annotations != os.Stdout {
		t.Fatalf("GitHub Actions: %#v, %v", p, ok)
	}
	p, ok = Detect(func(k string) string {
		return map[string]string{"GITLAB_CI": "true", "CI_MERGE_REQUEST_IID": "3", "LOADLINE_COMMENT": "false"}[k]
	})
	if g, isGL := p.(*GitLab); !ok || !isGL || g.Env.MRIID != 3 || g.Comment {
		t.Fatalf("GitLab CI: %#v, %v", p, ok)
	}
	if _, ok := Detect(func(string) string { return "" }); ok {
		t.Fatal("detected a CI in an empty environment")
	}
}

// TestGitHubEnvPayloadBounded: the event payload path is read only when it
// is a regular file of at most maxEventPayload bytes (GitHub caps webhook
// payloads at 25 MB, per its webhook documentation, from memory), so a
// stray path to a device or a huge file is an error naming it, not a read
// without end.
func TestGitHubEnvPayloadBounded(t *testing.T) {
	dir := t.TempDir()
	huge := filepath.Join(dir, "huge.json")
	f, err := os.Create(huge)
	if err != nil {
		t.Fatal(err)
	}
	if err := f.Truncate(maxEventPayload + 1); err != nil { // sparse: no disk used
		t.Fatal(err)
	}
	f.Close()
	for path, want := range map[string]string{huge: "more than the", "/dev/zero": "not a regular file"} {
		_, err := GitHubEnvFrom(func(k string) string { return map[string]string{"GITHUB_EVENT_PATH": path}[k] })
		if err == nil || !strings.Contains(err.Error(), want) || !strings.Contains(err.Error(), path) {
			t.Errorf("%s: error %v, want one naming the file and saying %q", path, err, want)
		}
	}
}
