// Package action brings a check's report to where reviewers look: on
// GitHub, the job summary, workflow annotations on the model files, one
// pull-request comment kept up to date and a commit status; on GitLab, one
// merge-request note kept up to date. It is given the rendered markdown and
// the verdict; it renders nothing itself but annotations.
//
// Posting never changes the verdict: a token that may not write gives a
// warning for the caller to print, and an unreachable API an error the
// caller may turn into exit 3 when asked to.
package action

import (
	"context"
	"errors"
	"io"
	"os"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/loadline/loadline/budget"
)

// Marker is the hidden first line of loadline's comment or note, by which
// a later run finds the comment to edit instead of adding another.
const Marker = "<!-- loadline:budget-report -->"

// hasMarker reports whether a comment body is one of ours: its first line
// is Marker. A comment that merely quotes the marker further down is not.
func hasMarker(body string) bool {
	first, _, _ := strings.Cut(strings.TrimLeft(body, " \t\r\n"), "\n")
	return strings.TrimSpace(first) == Marker
}

// commentBody puts the marker above the report, cut to fit limit.
func commentBody(body string, limit int, where string) string {
	head := Marker + "\n"
	return head + fitBody(body, limit-len(head), utf8.RuneCountInString, where)
}

// ErrNothingPosted is the error Post returns (wrapped, with the reason)
// when the report reached no place a reviewer looks: no job summary file,
// and no comment, note or status (no token, not a pull request, a token
// that may not write). The caller prints it; with --post-required it is
// exit 3 like any failure to post.
var ErrNothingPosted = errors.New("nothing was posted")

// Poster posts a check's report where the code host shows it. body is the
// rendered markdown, res the verdict it renders. warnings are for the
// caller to print (a token that may not write, an event that is no pull
// request); they never change the verdict. err is a failure to reach or
// use the API after retries, or to write the job's files.
type Poster interface {
	Post(ctx context.Context, body string, res *budget.Result) (warnings []string, err error)
}

// Detect chooses the poster for the CI the environment describes:
// GitHub Actions (GITHUB_ACTIONS=true) or GitLab CI (GITLAB_CI=true).
// ok is false elsewhere. Besides the platforms' own variables it reads:
//
//	LOADLINE_COMMENT=false        no pull-request comment or note
//	LOADLINE_COMMIT_STATUS=true   set the "loadline" commit status (GitHub)
//	LOADLINE_FAIL_ON=fail|warn|never  the verdict that makes the status a failure
//	LOADLINE_API_TIMEOUT=30s      deadline of each API request
//	LOADLINE_API_MAX_WAIT=60s     longest wait for a retry, and for all of one call's retries
//	LOADLINE_API_DEADLINE=3m      the most time posting takes, all calls together
//
// On GitHub the annotations go to standard output, where the runner reads
// workflow commands.
func Detect(getenv func(string) string) (Poster, bool) {
	return DetectTo(getenv, os.Stdout)
}

// DetectTo is Detect with the annotations written to w (the command's
// standard output, as the caller holds it).
func DetectTo(getenv func(string) string, w io.Writer) (Poster, bool) {
	retry := Retry{}
	if d, err := time.ParseDuration(getenv("LOADLINE_API_TIMEOUT")); err == nil && d > 0 {
		retry.Timeout = d
	}
	if d, err := time.ParseDuration(getenv("LOADLINE_API_MAX_WAIT")); err == nil && d > 0 {
		retry.MaxWait, retry.MaxTotalWait = d, d
	}
	if d, err := time.ParseDuration(getenv("LOADLINE_API_DEADLINE")); err == nil && d > 0 {
		retry.Deadline = d
	}
	comment := !isFalse(getenv("LOADLINE_COMMENT"))
	switch {
	case getenv("GITHUB_ACTIONS") == "true":
		env, err := GitHubEnvFrom(getenv)
		g := NewGitHub(env, w)
		g.EnvErr = err
		g.Retry = retry
		g.Comment = comment
		g.Status = isTrue(getenv("LOADLINE_COMMIT_STATUS"))
		if f := getenv("LOADLINE_FAIL_ON"); f != "" {
			g.FailOn = f
		}
		return g, true
	case getenv("GITLAB_CI") == "true":
		env, err := GitLabEnvFrom(getenv)
		return &GitLab{Env: env, EnvErr: err, Retry: retry, Comment: comment}, true
	}
	return nil, false
}

func isTrue(s string) bool {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "1", "true", "yes", "on":
		return true
	}
	return false
}

func isFalse(s string) bool {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "0", "false", "no", "off":
		return true
	}
	return false
}
