package action

import (
	"context"
	"errors"
	"fmt"
	"net/http"
	"time"
)

// MaxPages bounds how many pages of comments or notes one run reads while
// looking for its own (100 a page: 5,000 comments). An API that always
// names a next page is stopped there with an error, not followed forever.
const MaxPages = 50

// defaultDeadline is the default of Retry.Deadline: the most time one Post
// spends on the API, all calls, pages and retries together.
const defaultDeadline = 3 * time.Minute

// apiClient is the HTTP client of every API call: retries and deadlines
// from policy, and no redirect followed. The token is set on each request
// (by go-github's transport, or by GitLab.do), so Go's rule of dropping
// Authorization on a redirect to another host would not hold: a redirect
// is an error instead, naming where it pointed.
func apiClient(base http.RoundTripper, policy Retry) *http.Client {
	return &http.Client{Transport: newTransport(base, policy), CheckRedirect: refuseRedirect}
}

// RedirectError is an API answer that redirects. loadline does not follow
// it: the request carries the token.
type RedirectError struct {
	Method     string
	From       string // the URL asked, redacted
	StatusCode int
	To         string // the host the answer points at
	ToURL      string // the address, redacted
}

func (e *RedirectError) Error() string {
	return fmt.Sprintf("%s %s answered HTTP %d, a redirect to %s (%s): not followed, API requests carry the token and go only to the configured API address", e.Method, e.From, e.StatusCode, e.To, e.ToURL)
}

func refuseRedirect(req *http.Request, via []*http.Request) error {
	first := via[0]
	e := &RedirectError{Method: first.Method, From: first.URL.Redacted(), To: req.URL.Host, ToURL: req.URL.Redacted()}
	if req.Response != nil {
		e.StatusCode = req.Response.StatusCode
	}
	return e
}

// withDeadline bounds one Post by the policy's Deadline.
func withDeadline(ctx context.Context, policy Retry) (context.Context, context.CancelFunc) {
	return context.WithTimeout(ctx, policy.withDefaults().Deadline)
}

// deadlineError words an error met after the posting deadline passed.
func deadlineError(ctx context.Context, policy Retry, err error) error {
	if err == nil || !errors.Is(ctx.Err(), context.DeadlineExceeded) {
		return err
	}
	return fmt.Errorf("posting took longer than its deadline of %s (LOADLINE_API_DEADLINE): %w", policy.withDefaults().Deadline, err)
}

// PagesError says that listing comments or notes passed MaxPages.
type PagesError struct {
	What string // "comments", "notes"
}

func (e *PagesError) Error() string {
	return fmt.Sprintf("still more %s after %d pages of 100; stopped looking for loadline's own", e.What, MaxPages)
}
