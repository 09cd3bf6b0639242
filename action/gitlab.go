package action

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"github.com/loadline/loadline/budget"
)

// GitLab posts a check's report as one note on a GitLab merge request,
// through the REST API's merge-request notes endpoints, and edits that
// note on every later run.
type GitLab struct {
	Env GitLabEnv
	// Comment turns the note on; without it Post does nothing.
	Comment bool
	Retry   Retry
	// Transport carries the requests (default http.DefaultTransport).
	Transport http.RoundTripper
	// EnvErr is an error met reading the environment.
	EnvErr error
}

// gitlabNote is the part of a GitLab note loadline reads.
type gitlabNote struct {
	ID     int64       `json:"id"`
	Body   string      `json:"body"`
	System bool        `json:"system"`
	Author *gitlabUser `json:"author,omitempty"`
}

// gitlabUser is a note's author, or the token's user (GET /user).
type gitlabUser struct {
	ID       int64  `json:"id"`
	Username string `json:"username"`
}

// GitLabError is a GitLab API answer outside 2xx.
type GitLabError struct {
	Method, URL string
	StatusCode  int
	Message     string
	// rateLimited is set when the answer carried rate-limit headers.
	rateLimited bool
}

func (e *GitLabError) Error() string {
	s := fmt.Sprintf("%s %s: HTTP %d", e.Method, e.URL, e.StatusCode)
	if e.Message != "" {
		s += ": " + e.Message
	}
	return s
}

// Post creates or edits loadline's note on the merge request. A token that
// may not write notes (a job token, or a fork's) gives a warning, not an
// error.
func (g *GitLab) Post(ctx context.Context, body string, res *budget.Result) (warnings []string, err error) {
	red := newRedactor(g.Env.Token)
	ctx, cancel := withDeadline(ctx, g.Retry)
	defer cancel()
	posted := false
	defer func() {
		if err == nil && !posted {
			err = fmt.Errorf("%w: no merge-request note (see the warnings; LOADLINE_COMMENT=false turns notes off)", ErrNothingPosted)
		}
		warnings = red.strings(warnings)
		err = red.error(deadlineError(ctx, g.Retry, err))
	}()
	if g.EnvErr != nil {
		return nil, g.EnvErr
	}
	if !g.Comment {
		return nil, nil
	}
	switch {
	case g.Env.MRIID == 0:
		return []string{"not a merge request pipeline (no CI_MERGE_REQUEST_IID): no note posted"}, nil
	case g.Env.APIURL == "" || g.Env.ProjectID == "":
		return nil, errors.New("GitLab CI environment incomplete: CI_API_V4_URL and CI_PROJECT_ID are needed to post a note")
	case g.Env.Token == "":
		return []string{"no GitLab token (LOADLINE_GITLAB_TOKEN, GITLAB_TOKEN or CI_JOB_TOKEN): no note posted"}, nil
	}
	hc := apiClient(g.Transport, g.Retry)
	notes := strings.TrimRight(g.Env.APIURL, "/") + "/projects/" + url.PathEscape(g.Env.ProjectID) +
		"/merge_requests/" + strconv.Itoa(g.Env.MRIID) + "/notes"
	text := commentBody(body, GitLabNoteLimit, "see the job log")

	id, err := g.findNote(ctx, hc, notes)
	if err != nil {
		if w, ok := g.refused(err, "read the merge request's notes"); ok {
			return []string{w}, nil
		}
		return nil, fmt.Errorf("listing notes on merge request !%d: %w", g.Env.MRIID, err)
	}
	payload := map[string]string{"body": text}
	if id != 0 {
		err = g.do(ctx, hc, http.MethodPut, notes+"/"+strconv.FormatInt(id, 10), payload, nil)
		if err == nil {
			posted = true
			return nil, nil
		}
		var e *GitLabError
		if !errors.As(err, &e) || e.rateLimited || (e.StatusCode != http.StatusForbidden && e.StatusCode != http.StatusNotFound) {
			return nil, fmt.Errorf("editing note %d on merge request !%d: %w", id, g.Env.MRIID, err)
		}
		warnings = append(warnings, fmt.Sprintf("editing loadline's note %d on merge request !%d was refused (HTTP %d): adding a new note", id, g.Env.MRIID, e.StatusCode))
	}
	if err := g.do(ctx, hc, http.MethodPost, notes, payload, nil); err != nil {
		if w, ok := g.refused(err, "add a note"); ok {
			return append(warnings, w), nil
		}
		return warnings, fmt.Errorf("adding a note on merge request !%d: %w", g.Env.MRIID, err)
	}
	posted = true
	return warnings, nil
}

// findNote pages through the merge request's notes, oldest first, 100 a
// page, following X-Next-Page for at most MaxPages pages, and returns the
// first one carrying Marker that the token's own user wrote. It asks who
// that is only when a marked note is there.
func (g *GitLab) findNote(ctx context.Context, hc *http.Client, notes string) (int64, error) {
	page := "1"
	var self *gitlabUser
	for n := 1; page != ""; n++ {
		if n > MaxPages {
			return 0, &PagesError{What: "notes"}
		}
		u := notes + "?per_page=100&page=" + url.QueryEscape(page) + "&sort=asc&order_by=created_at"
		var list []gitlabNote
		var next string
		err := g.do(ctx, hc, http.MethodGet, u, nil, func(resp *http.Response) error {
			next = strings.TrimSpace(resp.Header.Get("X-Next-Page"))
			return json.NewDecoder(resp.Body).Decode(&list)
		})
		if err != nil {
			return 0, err
		}
		for _, n := range list {
			if n.System || !hasMarker(n.Body) {
				continue
			}
			if self == nil {
				if self, err = g.identity(ctx, hc); err != nil {
					return 0, err
				}
			}
			if n.Author != nil && self.Username != "" && strings.EqualFold(n.Author.Username, self.Username) &&
				(self.ID == 0 || n.Author.ID == self.ID) {
				return n.ID, nil
			}
		}
		if next == page {
			return 0, fmt.Errorf("GET %s: X-Next-Page names the same page %s", notes, page)
		}
		page = next
	}
	return 0, nil
}

// identity returns the user the token writes notes as: GET /user for an
// access token (a project or group token's bot user included). A job
// token may not ask; its notes are written as the user who started the
// job, GITLAB_USER_LOGIN. With neither, no note is taken for loadline's.
func (g *GitLab) identity(ctx context.Context, hc *http.Client) (*gitlabUser, error) {
	var u gitlabUser
	err := g.do(ctx, hc, http.MethodGet, strings.TrimRight(g.Env.APIURL, "/")+"/user", nil, func(resp *http.Response) error {
		return json.NewDecoder(io.LimitReader(resp.Body, 1<<20)).Decode(&u)
	})
	if err == nil && u.Username != "" {
		return &u, nil
	}
	var e *GitLabError
	if err != nil && (!errors.As(err, &e) || e.rateLimited || e.StatusCode >= 500) {
		return nil, fmt.Errorf("asking the API who the token is (GET /user): %w", err)
	}
	return &gitlabUser{Username: g.Env.JobUser}, nil
}

// do sends one API request with a JSON body (when payload is not nil) and
// hands a 2xx answer to read (when not nil).
func (g *GitLab) do(ctx context.Context, hc *http.Client, method, u string, payload any, read func(*http.Response) error) error {
	var body io.Reader
	if payload != nil {
		b, err := json.Marshal(payload)
		if err != nil {
			return err
		}
		body = bytes.NewReader(b)
	}
	req, err := http.NewRequestWithContext(ctx, method, u, body)
	if err != nil {
		return err
	}
	header := g.Env.TokenHeader
	if header == "" {
		header = "PRIVATE-TOKEN"
	}
	req.Header.Set(header, g.Env.Token)
	req.Header.Set("Accept", "application/json")
	req.Header.Set("User-Agent", "loadline")
	if payload != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := hc.Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if resp.StatusCode < 200 || resp.StatusCode > 299 {
		e := &GitLabError{Method: method, URL: req.URL.Redacted(), StatusCode: resp.StatusCode, rateLimited: isRateLimited(resp)}
		data, _ := io.ReadAll(io.LimitReader(resp.Body, 4<<10))
		var msg struct {
			Message any    `json:"message"`
			Error   string `json:"error"`
		}
		if json.Unmarshal(data, &msg) == nil {
			switch {
			case msg.Error != "":
				e.Message = msg.Error
			case msg.Message != nil:
				e.Message = fmt.Sprint(msg.Message)
			}
		}
		return e
	}
	if read != nil {
		if err := read(resp); err != nil {
			return fmt.Errorf("%s %s: reading the answer: %w", method, req.URL.Redacted(), err)
		}
	}
	return nil
}

// refused tells a 401 or 403 that is a refusal from a rate limit, and
// words the warning for it.
func (g *GitLab) refused(err error, what string) (string, bool) {
	var e *GitLabError
	if !errors.As(err, &e) || e.rateLimited || (e.StatusCode != http.StatusForbidden && e.StatusCode != http.StatusUnauthorized) {
		return "", false
	}
	who := "the token (" + g.Env.TokenHeader + ")"
	switch {
	case g.Env.Fork:
		who = "the token of a merge request from a fork"
	case g.Env.TokenHeader == "JOB-TOKEN":
		who = "the job token (CI_JOB_TOKEN; set LOADLINE_GITLAB_TOKEN to an access token with the api scope)"
	}
	msg := e.Message
	if msg == "" {
		msg = http.StatusText(e.StatusCode)
	}
	return fmt.Sprintf("%s may not %s on merge request !%d (HTTP %d: %s); the report is in the job log and the verdict stands", who, what, g.Env.MRIID, e.StatusCode, msg), true
}
