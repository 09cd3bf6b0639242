package action

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strings"

	"github.com/google/go-github/v75/github"

	"github.com/loadline/loadline/budget"
)

// GitHub posts a check's report on a GitHub pull request: the job summary,
// the annotations, one comment kept up to date, optionally a commit status.
type GitHub struct {
	Env GitHubEnv
	// Token, when set, is used instead of Env.Token.
	Token string
	// Annotations receives the workflow commands (the step's standard
	// output in a job); nil writes none.
	Annotations io.Writer
	// Comment turns the pull-request comment on.
	Comment bool
	// Status turns the commit status on: context "loadline" on the pull
	// request's head commit.
	Status bool
	// FailOn is the verdict from which the commit status is "failure":
	// "fail" (the default), "warn" or "never", as check's --fail-on.
	FailOn string
	Retry  Retry
	// Transport carries the requests (default http.DefaultTransport);
	// retries and timeouts are layered on top of it.
	Transport http.RoundTripper
	// EnvErr is an error met reading the environment; Post reports it
	// after doing what it can without the payload.
	EnvErr error
}

// StatusContext is the name of loadline's commit status.
const StatusContext = "loadline"

// NewGitHub returns a poster for env that comments and writes annotations
// to stdout.
func NewGitHub(env GitHubEnv, annotations io.Writer) *GitHub {
	return &GitHub{Env: env, Annotations: annotations, Comment: true, FailOn: "fail"}
}

func (g *GitHub) token() string {
	if g.Token != "" {
		return g.Token
	}
	return g.Env.Token
}

// client builds the go-github client on GITHUB_API_URL, which is the API
// root as is (https://api.github.com, or https://HOST/api/v3 on GitHub
// Enterprise Server), so it becomes BaseURL unchanged.
func (g *GitHub) client() (*github.Client, error) {
	c := github.NewClient(apiClient(g.Transport, g.Retry))
	if t := g.token(); t != "" {
		c = c.WithAuthToken(t)
	}
	if g.Env.APIURL != "" {
		u, err := url.Parse(strings.TrimRight(g.Env.APIURL, "/") + "/")
		if err != nil {
			return nil, fmt.Errorf("GITHUB_API_URL: %w", err)
		}
		c.BaseURL = u
	}
	c.UserAgent = "loadline"
	return c, nil
}

// Post writes the job summary and the annotations, then, on a pull
// request, creates or edits loadline's comment and sets the commit status.
// A token that may not write (a pull request from a fork) gives warnings,
// not an error: the job summary still holds the report and the verdict is
// the check's. An error is an unreachable or failing API, after retries.
func (g *GitHub) Post(ctx context.Context, body string, res *budget.Result) (warnings []string, err error) {
	red := newRedactor(g.token())
	ctx, cancel := withDeadline(ctx, g.Retry)
	defer cancel()
	posted := false
	defer func() {
		if err == nil && !posted {
			err = fmt.Errorf("%w: no job summary file (GITHUB_STEP_SUMMARY), and no comment or status (see the warnings)", ErrNothingPosted)
		}
		warnings = red.strings(warnings)
		err = red.error(deadlineError(ctx, g.Retry, err))
	}()
	var errs []error
	if g.Env.StepSummary != "" {
		if err := AppendStepSummary(g.Env.StepSummary, body); err != nil {
			errs = append(errs, err)
		} else {
			posted = true
		}
	}
	if g.Annotations != nil {
		if err := WriteAnnotations(g.Annotations, res); err != nil {
			errs = append(errs, fmt.Errorf("annotations: %w", err))
		}
	}
	if g.EnvErr != nil {
		return warnings, errors.Join(append(errs, g.EnvErr)...)
	}
	outputs := [][2]string{}
	if res != nil {
		outputs = append(outputs, [2]string{"verdict", string(res.Verdict)})
	}
	if !g.Comment && !g.Status {
		return warnings, errors.Join(append(errs, g.writeOutputs(outputs))...)
	}
	if g.Env.PullNumber == 0 {
		warnings = append(warnings, fmt.Sprintf("the %s event is not a pull request: no comment or status posted; the report is in the job summary", eventName(g.Env)))
		return warnings, errors.Join(append(errs, g.writeOutputs(outputs))...)
	}
	if g.token() == "" {
		warnings = append(warnings, "no GitHub token (GITHUB_TOKEN): no comment or status posted; the report is in the job summary")
		return warnings, errors.Join(append(errs, g.writeOutputs(outputs))...)
	}
	c, err := g.client()
	if err != nil {
		return warnings, errors.Join(append(errs, err)...)
	}
	if g.Comment {
		url, w, err := g.upsertComment(ctx, c, body)
		warnings = append(warnings, w...)
		if err != nil {
			errs = append(errs, err)
		} else if url != "" {
			posted = true
			outputs = append(outputs, [2]string{"comment-url", url})
		}
	}
	if g.Status && res != nil {
		w, err := g.setStatus(ctx, c, res)
		warnings = append(warnings, w...)
		if err != nil {
			errs = append(errs, err)
		} else if len(w) == 0 {
			posted = true
		}
	}
	errs = append(errs, g.writeOutputs(outputs))
	return warnings, errors.Join(errs...)
}

func eventName(e GitHubEnv) string {
	if e.EventName == "" {
		return "current"
	}
	return e.EventName
}

func (g *GitHub) writeOutputs(kv [][2]string) error {
	if g.Env.Output == "" || len(kv) == 0 {
		return nil
	}
	return AppendOutputs(g.Env.Output, kv)
}

// upsertComment edits loadline's own comment, found by Marker among the
// pull request's comments (at most MaxPages pages) and written by the job's
// own identity, or creates it. An edit refused with 403 or 404 (the comment
// is someone else's after all, or was deleted) falls back to creating a new
// comment. It returns the comment's address.
func (g *GitHub) upsertComment(ctx context.Context, c *github.Client, body string) (string, []string, error) {
	owner, repo, pr := g.Env.Owner(), g.Env.Repo(), g.Env.PullNumber
	text := commentBody(body, GitHubCommentLimit, "see the job summary")
	id, err := g.findComment(ctx, c, owner, repo, pr)
	if err != nil {
		if w, ok := g.refused(err, "read the pull request's comments"); ok {
			return "", []string{w}, nil
		}
		return "", nil, fmt.Errorf("listing comments on %s#%d: %w", g.Env.Repository, pr, err)
	}
	var warnings []string
	if id != 0 {
		out, _, err := c.Issues.EditComment(ctx, owner, repo, id, &github.IssueComment{Body: &text})
		if err == nil {
			return out.GetHTMLURL(), nil, nil
		}
		if !editRefused(err) {
			return "", nil, fmt.Errorf("editing comment %d on %s#%d: %w", id, g.Env.Repository, pr, err)
		}
		warnings = append(warnings, fmt.Sprintf("editing loadline's comment %d on %s#%d was refused (%s): posting a new comment", id, g.Env.Repository, pr, statusText(err)))
	}
	out, _, err := c.Issues.CreateComment(ctx, owner, repo, pr, &github.IssueComment{Body: &text})
	if err != nil {
		if w, ok := g.refused(err, "comment"); ok {
			return "", append(warnings, w), nil
		}
		return "", warnings, fmt.Errorf("commenting on %s#%d: %w", g.Env.Repository, pr, err)
	}
	return out.GetHTMLURL(), warnings, nil
}

// editRefused says whether an edit failed because the host will not let
// this token edit that comment: 403 (not a rate limit) or 404.
func editRefused(err error) bool {
	var er *github.ErrorResponse
	if !errors.As(err, &er) || er.Response == nil {
		return false
	}
	code := er.Response.StatusCode
	return code == http.StatusNotFound || (code == http.StatusForbidden && !isRateLimited(er.Response))
}

func statusText(err error) string {
	var er *github.ErrorResponse
	if errors.As(err, &er) && er.Response != nil {
		if er.Message != "" {
			return fmt.Sprintf("HTTP %d: %s", er.Response.StatusCode, er.Message)
		}
		return fmt.Sprintf("HTTP %d", er.Response.StatusCode)
	}
	return err.Error()
}

// findComment returns the ID of the first comment that carries Marker and
// that the job's own identity wrote, or 0. It reads at most MaxPages pages,
// and asks for the identity only when a marked comment is there.
func (g *GitHub) findComment(ctx context.Context, c *github.Client, owner, repo string, pr int) (int64, error) {
	opts := &github.IssueListCommentsOptions{ListOptions: github.ListOptions{PerPage: 100}}
	self := ""
	for page := 1; ; page++ {
		if page > MaxPages {
			return 0, &PagesError{What: "comments"}
		}
		comments, resp, err := c.Issues.ListComments(ctx, owner, repo, pr, opts)
		if err != nil {
			return 0, err
		}
		for _, cm := range comments {
			if !hasMarker(cm.GetBody()) {
				continue
			}
			if self == "" {
				if self, err = g.identity(ctx, c); err != nil {
					return 0, err
				}
			}
			if writtenBy(cm, self) {
				return cm.GetID(), nil
			}
		}
		if resp.NextPage == 0 {
			return 0, nil
		}
		if resp.NextPage == opts.Page {
			return 0, fmt.Errorf("the API names page %d as the next page of itself", opts.Page)
		}
		opts.Page = resp.NextPage
	}
}

// ActionsBotLogin is the login under which GitHub Actions' own token
// (GITHUB_TOKEN) writes comments.
const ActionsBotLogin = "github-actions[bot]"

// identity returns the login the token writes comments as: the user of a
// personal token (GET /user), the app's bot login ("<slug>[bot]") for a
// GitHub App installation token, which GET /user refuses but GraphQL's
// viewer answers, and failing both the Actions bot login.
func (g *GitHub) identity(ctx context.Context, c *github.Client) (string, error) {
	u, _, err := c.Users.Get(ctx, "")
	if err == nil && u.GetLogin() != "" {
		return u.GetLogin(), nil
	}
	if err != nil && !editRefused(err) {
		return "", fmt.Errorf("asking the API who the token is (GET /user): %w", err)
	}
	if login, err := viewerLogin(ctx, c, g.Env.APIURL); err == nil && login != "" {
		return login, nil
	}
	return ActionsBotLogin, nil
}

// viewerLogin asks GitHub's GraphQL API for the viewer's login. The
// GraphQL endpoint is /graphql beside the REST root on github.com, and
// /api/graphql on GitHub Enterprise Server (REST at /api/v3).
func viewerLogin(ctx context.Context, c *github.Client, apiURL string) (string, error) {
	u := strings.TrimRight(apiURL, "/")
	if base, ok := strings.CutSuffix(u, "/api/v3"); ok {
		u = base + "/api/graphql"
	} else {
		u += "/graphql"
	}
	req, err := c.NewRequest(http.MethodPost, u, map[string]string{"query": "query { viewer { login } }"})
	if err != nil {
		return "", err
	}
	var out struct {
		Data struct {
			Viewer struct {
				Login string `json:"login"`
			} `json:"viewer"`
		} `json:"data"`
	}
	if _, err := c.Do(ctx, req, &out); err != nil {
		return "", err
	}
	return out.Data.Viewer.Login, nil
}

// writtenBy reports whether the job's own identity wrote a comment. A
// comment with no author, or by anyone else (another bot, a maintainer
// quoting the marker), is not edited: someone else could otherwise post
// the marker first and keep the report from updating.
func writtenBy(cm *github.IssueComment, login string) bool {
	u := cm.GetUser()
	return u != nil && login != "" && strings.EqualFold(u.GetLogin(), login)
}

// refused tells a 403 that is a refusal (the token lacks the permission,
// as a fork's read-only token does) from a rate limit, and words the
// warning for it.
func (g *GitHub) refused(err error, what string) (string, bool) {
	var er *github.ErrorResponse
	if !errors.As(err, &er) || er.Response == nil || er.Response.StatusCode != http.StatusForbidden || isRateLimited(er.Response) {
		return "", false
	}
	who := "the job's token"
	if g.Env.Fork() {
		who = fmt.Sprintf("the token of a pull request from the fork %s", g.Env.HeadRepo)
	}
	msg := er.Message
	if msg == "" {
		msg = "forbidden"
	}
	return fmt.Sprintf("%s may not %s on %s#%d (HTTP 403: %s); the report is in the job summary and the verdict stands", who, what, g.Env.Repository, g.Env.PullNumber, msg), true
}

// setStatus sets the "loadline" commit status on the pull request's head.
func (g *GitHub) setStatus(ctx context.Context, c *github.Client, res *budget.Result) ([]string, error) {
	sha := g.Env.HeadSHA
	if sha == "" {
		sha = g.Env.SHA
	}
	if sha == "" {
		return []string{"no head commit in the event payload: no commit status set"}, nil
	}
	st := &github.RepoStatus{
		State:       github.Ptr(statusState(res.Verdict, g.FailOn)),
		Context:     github.Ptr(StatusContext),
		Description: github.Ptr(StatusDescription(res)),
	}
	if u := g.Env.RunURL(); u != "" {
		st.TargetURL = github.Ptr(u)
	}
	if _, _, err := c.Repositories.CreateStatus(ctx, g.Env.Owner(), g.Env.Repo(), sha, st); err != nil {
		if w, ok := g.refused(err, "set a commit status"); ok {
			return []string{w}, nil
		}
		return nil, fmt.Errorf("setting the %s status on %s: %w", StatusContext, shortSHA(sha), err)
	}
	return nil, nil
}

// statusState maps a verdict to a commit status state under failOn.
func statusState(v budget.Status, failOn string) string {
	switch failOn {
	case "never":
		return "success"
	case "warn":
		if v == budget.Warn || v == budget.Fail {
			return "failure"
		}
		return "success"
	}
	if v == budget.Fail {
		return "failure"
	}
	return "success"
}

// StatusDescription is the one-line commit status text: the verdict and
// how many models fail and warn, at most the 140 characters GitHub allows.
func StatusDescription(res *budget.Result) string {
	var fail, warn int
	for _, m := range res.Models {
		switch {
		case m.Error != "" || m.Status == budget.Fail:
			fail++
		case m.Status == budget.Warn:
			warn++
		}
	}
	var s string
	switch res.Verdict {
	case budget.Fail:
		s = "over budget"
	case budget.Warn:
		s = "within budget, with warnings"
	default:
		s = "within budget"
	}
	s = fmt.Sprintf("%s: %d models checked, %d failing, %d warning", s, len(res.Models), fail, warn)
	return truncateRunes(s, 140)
}

func truncateRunes(s string, n int) string {
	r := []rune(s)
	if len(r) <= n {
		return s
	}
	return string(r[:n-1]) + "…"
}

func shortSHA(s string) string {
	if len(s) > 12 {
		return s[:12]
	}
	return s
}
