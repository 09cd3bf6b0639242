package action

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"strconv"
	"strings"
	"time"
)

// Retry bounds how requests to a code host are retried and timed out. The
// zero value is usable: every zero field takes the default named beside it.
type Retry struct {
	// Attempts is the most requests made for one call, the first included
	// (default 5).
	Attempts int
	// MaxWait is the longest single wait before a retry (default 60 s). A
	// rate limit that resets later than this is not waited for: the call
	// fails at once with the host's answer.
	MaxWait time.Duration
	// MaxTotalWait is the most time spent waiting over all retries of one
	// call (default 60 s).
	MaxTotalWait time.Duration
	// Backoff is the first wait after a server error; it doubles on each
	// further one (default 1 s).
	Backoff time.Duration
	// Timeout is the deadline of each request, from sending it to reading
	// its whole answer (default 30 s).
	Timeout time.Duration
	// Sleep waits for d or until ctx is done; tests pass a fake. Default: a
	// timer.
	Sleep func(ctx context.Context, d time.Duration) error
	// Now is the clock the rate-limit reset headers are read against.
	// Default: time.Now.
	Now func() time.Time
	// Deadline bounds one Post: every call, page and retry together
	// (default 3 min).
	Deadline time.Duration
}

const (
	defaultAttempts     = 5
	defaultMaxWait      = 60 * time.Second
	defaultMaxTotalWait = 60 * time.Second
	defaultBackoff      = time.Second
	defaultTimeout      = 30 * time.Second
)

func (r Retry) withDefaults() Retry {
	if r.Attempts <= 0 {
		r.Attempts = defaultAttempts
	}
	if r.MaxWait <= 0 {
		r.MaxWait = defaultMaxWait
	}
	if r.MaxTotalWait <= 0 {
		r.MaxTotalWait = defaultMaxTotalWait
	}
	if r.Backoff <= 0 {
		r.Backoff = defaultBackoff
	}
	if r.Timeout <= 0 {
		r.Timeout = defaultTimeout
	}
	if r.Sleep == nil {
		r.Sleep = sleep
	}
	if r.Now == nil {
		r.Now = time.Now
	}
	if r.Deadline <= 0 {
		r.Deadline = defaultDeadline
	}
	return r
}

func sleep(ctx context.Context, d time.Duration) error {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// retryTransport is an http.RoundTripper that gives every attempt its own
// deadline and retries server errors and rate-limit answers.
type retryTransport struct {
	base   http.RoundTripper
	policy Retry
}

func newTransport(base http.RoundTripper, policy Retry) *retryTransport {
	if base == nil {
		base = http.DefaultTransport
	}
	return &retryTransport{base: base, policy: policy.withDefaults()}
}

// RoundTrip sends req, retrying as the policy allows. The answer returned is
// the last one received; a caller sees a 5xx or rate-limit answer only once
// the retries are used up or a wait would pass the policy's bounds.
func (t *retryTransport) RoundTrip(req *http.Request) (*http.Response, error) {
	p := t.policy
	var waited time.Duration
	for attempt := 1; ; attempt++ {
		resp, err := t.once(req, attempt)
		if err != nil {
			return nil, err
		}
		wait, retry := p.waitFor(resp, attempt)
		if !retry || attempt >= p.Attempts || wait > p.MaxWait || waited+wait > p.MaxTotalWait {
			return resp, nil
		}
		// Drain a little so the connection can be reused, then let go.
		_, _ = io.Copy(io.Discard, io.LimitReader(resp.Body, 64<<10))
		resp.Body.Close()
		if err := p.Sleep(req.Context(), wait); err != nil {
			return nil, fmt.Errorf("waiting %s to retry %s %s: %w", wait, req.Method, req.URL.Redacted(), err)
		}
		waited += wait
	}
}

// once sends one attempt under its own deadline. The deadline covers
// reading the body too: it is released when the caller closes the body.
func (t *retryTransport) once(req *http.Request, attempt int) (*http.Response, error) {
	ctx, cancel := context.WithTimeout(req.Context(), t.policy.Timeout)
	r := req.Clone(ctx)
	if attempt > 1 && req.Body != nil && req.Body != http.NoBody {
		if req.GetBody == nil {
			cancel()
			return nil, fmt.Errorf("cannot retry %s %s: its body cannot be replayed", req.Method, req.URL.Redacted())
		}
		body, err := req.GetBody()
		if err != nil {
			cancel()
			return nil, err
		}
		r.Body = body
	}
	resp, err := t.base.RoundTrip(r)
	if err != nil {
		cancel()
		if errors.Is(err, context.DeadlineExceeded) && req.Context().Err() == nil {
			return nil, &TimeoutError{Method: req.Method, URL: req.URL.Redacted(), After: t.policy.Timeout}
		}
		return nil, err
	}
	resp.Body = &cancelBody{ReadCloser: resp.Body, cancel: cancel, timeout: t.policy.Timeout, req: req, left: MaxAnswerBytes}
	return resp, nil
}

// MaxAnswerBytes bounds how much of one API answer is read: a page of 100
// comments at GitHub's 65,536-character limit is under 26 MiB. An answer
// that goes on is cut there with an error, not read into memory.
const MaxAnswerBytes = 32 << 20

// AnswerTooLargeError says that an API answer passed MaxAnswerBytes.
type AnswerTooLargeError struct{ Method, URL string }

func (e *AnswerTooLargeError) Error() string {
	return fmt.Sprintf("%s %s: the answer is larger than %d MiB; not read further", e.Method, e.URL, MaxAnswerBytes>>20)
}

// TimeoutError says that one request to a code host passed its deadline.
type TimeoutError struct {
	Method, URL string
	After       time.Duration
}

func (e *TimeoutError) Error() string {
	return fmt.Sprintf("%s %s: no complete answer within %s", e.Method, e.URL, e.After)
}

// Is lets errors.Is(err, context.DeadlineExceeded) hold for a timeout.
func (e *TimeoutError) Is(target error) bool { return target == context.DeadlineExceeded }

// cancelBody releases an attempt's deadline when the body is closed, and
// names a deadline passed while reading.
type cancelBody struct {
	io.ReadCloser
	cancel  context.CancelFunc
	timeout time.Duration
	req     *http.Request
	left    int64 // bytes that may still be read
}

func (b *cancelBody) Read(p []byte) (int, error) {
	if b.left <= 0 {
		return 0, &AnswerTooLargeError{Method: b.req.Method, URL: b.req.URL.Redacted()}
	}
	if int64(len(p)) > b.left {
		p = p[:b.left]
	}
	n, err := b.ReadCloser.Read(p)
	b.left -= int64(n)
	if err != nil && errors.Is(err, context.DeadlineExceeded) && b.req.Context().Err() == nil {
		err = &TimeoutError{Method: b.req.Method, URL: b.req.URL.Redacted(), After: b.timeout}
	}
	return n, err
}

func (b *cancelBody) Close() error {
	err := b.ReadCloser.Close()
	b.cancel()
	return err
}

// waitFor says whether an answer is worth retrying and after how long.
//
// Rate limits, as GitHub documents them: a 403 or 429 whose
// X-RateLimit-Remaining is 0 waits until X-RateLimit-Reset (seconds since
// the epoch); a 403 or 429 with Retry-After waits that many seconds (the
// secondary rate limit). GitLab sends the same with the names RateLimit-*
// and Retry-After. A 403 with none of these is a refusal, not a limit, and
// is not retried. A 5xx answer is retried with exponential backoff, or after
// its Retry-After when it has one.
func (p Retry) waitFor(resp *http.Response, attempt int) (time.Duration, bool) {
	h := resp.Header
	code := resp.StatusCode
	switch {
	case code == http.StatusForbidden || code == http.StatusTooManyRequests:
		if d, ok := retryAfter(h, p.Now()); ok {
			return d, true
		}
		if remaining(h) == "0" {
			if d, ok := resetIn(h, p.Now()); ok {
				return d, true
			}
			return p.MaxWait, true
		}
		if code == http.StatusTooManyRequests {
			return p.backoff(attempt), true
		}
		return 0, false
	case code >= 500 && code != http.StatusNotImplemented && code != http.StatusHTTPVersionNotSupported:
		if d, ok := retryAfter(h, p.Now()); ok {
			return d, true
		}
		return p.backoff(attempt), true
	}
	return 0, false
}

func (p Retry) backoff(attempt int) time.Duration {
	d := p.Backoff
	for i := 1; i < attempt && d < p.MaxWait; i++ {
		d *= 2
	}
	return min(d, p.MaxWait)
}

// isRateLimited says whether a 403 or 429 answer carries rate-limit
// headers, telling a spent quota from a refusal.
func isRateLimited(resp *http.Response) bool {
	if resp == nil {
		return false
	}
	if resp.StatusCode == http.StatusTooManyRequests {
		return true
	}
	if resp.StatusCode != http.StatusForbidden {
		return false
	}
	_, ra := retryAfter(resp.Header, time.Now())
	return ra || remaining(resp.Header) == "0"
}

func remaining(h http.Header) string {
	if v := h.Get("X-RateLimit-Remaining"); v != "" {
		return strings.TrimSpace(v)
	}
	return strings.TrimSpace(h.Get("RateLimit-Remaining"))
}

// resetIn reads X-RateLimit-Reset (or GitLab's RateLimit-Reset): a Unix time
// in seconds. A reset already passed means retry at once.
func resetIn(h http.Header, now time.Time) (time.Duration, bool) {
	v := h.Get("X-RateLimit-Reset")
	if v == "" {
		v = h.Get("RateLimit-Reset")
	}
	sec, err := strconv.ParseInt(strings.TrimSpace(v), 10, 64)
	if err != nil {
		return 0, false
	}
	// A reset beyond what a Duration holds is longer than any wait; one
	// as far in the past is passed. Between, time.Unix and the sum below
	// cannot wrap around.
	switch far := int64(math.MaxInt64/time.Second) - 1; {
	case sec > now.Unix()+far:
		return math.MaxInt64, true
	case sec < now.Unix()-far:
		return 0, true
	}
	// One second more: the reset is given in whole seconds, rounded down.
	return max(time.Unix(sec, 0).Sub(now)+time.Second, 0), true
}

// retryAfter reads Retry-After, in delay-seconds or as an HTTP date.
func retryAfter(h http.Header, now time.Time) (time.Duration, bool) {
	v := strings.TrimSpace(h.Get("Retry-After"))
	if v == "" {
		return 0, false
	}
	if sec, err := strconv.ParseInt(v, 10, 64); err == nil {
		if sec > int64(math.MaxInt64/time.Second) {
			return math.MaxInt64, true // longer than any wait, not wrapped around to a short one
		}
		return max(time.Duration(sec)*time.Second, 0), true
	}
	if t, err := http.ParseTime(v); err == nil {
		return max(t.Sub(now), 0), true
	}
	return 0, false
}
