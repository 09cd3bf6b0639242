package action

import (
	"net/url"
	"strings"
)

// redacted stands where a secret was.
const redacted = "[redacted]"

// redactor removes a token from every message built from it. Go's HTTP
// client does not put header values in its errors, and the token only ever
// travels in a header, but an error string may still come from anywhere
// (a proxy's answer, a misconfigured URL): every error and warning leaving
// this package goes through redact.
type redactor struct {
	secrets []string
}

func newRedactor(secrets ...string) redactor {
	var r redactor
	for _, s := range secrets {
		if strings.TrimSpace(s) == "" {
			continue
		}
		r.secrets = append(r.secrets, s)
		// The same secret as it would appear escaped in a URL.
		if q := url.QueryEscape(s); q != s {
			r.secrets = append(r.secrets, q)
		}
	}
	return r
}

func (r redactor) string(s string) string {
	for _, secret := range r.secrets {
		s = strings.ReplaceAll(s, secret, redacted)
	}
	return s
}

func (r redactor) strings(ss []string) []string {
	for i := range ss {
		ss[i] = r.string(ss[i])
	}
	return ss
}

// error returns err with the secrets cut from its message; errors.Is and
// errors.As still see the cause.
func (r redactor) error(err error) error {
	if err == nil {
		return nil
	}
	return &redactedError{msg: r.string(err.Error()), cause: err}
}

type redactedError struct {
	msg   string
	cause error
}

func (e *redactedError) Error() string { return e.msg }
func (e *redactedError) Unwrap() error { return e.cause }
