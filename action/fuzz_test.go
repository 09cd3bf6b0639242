package action

import (
	"math"
	"net/http"
	"strconv"
	"strings"
	"testing"
	"time"
	"unicode/utf8"
)

// askedWait is the wait a Retry-After value asks for, worked out apart
// from retryAfter and saturated instead of wrapped: delay-seconds or an
// HTTP date (RFC 9110, section 10.2.3).
func askedWait(v string, now time.Time) (time.Duration, bool) {
	v = strings.TrimSpace(v)
	if v == "" {
		return 0, false
	}
	if sec, err := strconv.ParseInt(v, 10, 64); err == nil {
		if sec > int64(math.MaxInt64/time.Second) {
			return math.MaxInt64, true
		}
		return time.Duration(sec) * time.Second, true
	}
	if t, err := http.ParseTime(v); err == nil {
		return t.Sub(now), true
	}
	return 0, false
}

// FuzzRetryWait: whatever a code host's rate-limit headers say
// (Retry-After, X-RateLimit-Remaining and X-RateLimit-Reset, as GitHub's
// REST documentation names them, or GitLab's RateLimit-*), waitFor gives a
// wait of zero or more, and never a wait shorter than MaxWait when the
// headers ask for a longer one: such a call fails at once with the host's
// answer instead of retrying early and spending its attempts. Seeds:
// answers as the hosts document them, and values at the ends of int64.
func FuzzRetryWait(f *testing.F) {
	f.Add(403, "60", "", "", false)
	f.Add(429, "", "0", "1700000100", false)
	f.Add(403, "", "0", "1700000000", true)
	f.Add(503, "Wed, 21 Oct 2015 07:28:00 GMT", "", "", false)
	f.Add(500, "", "", "", false)
	f.Add(403, "", "5", "", false)
	f.Add(429, "9223372037", "", "", false)
	f.Add(403, "", "0", "9223372036854775807", true)
	f.Add(403, "", "0", "-9223372036854775808", false)
	now := time.Unix(1700000000, 0)
	p := Retry{Now: func() time.Time { return now }}.withDefaults()
	f.Fuzz(func(t *testing.T, code int, after, remain, reset string, gitlab bool) {
		prefix := "X-"
		if gitlab {
			prefix = ""
		}
		h := http.Header{}
		for k, v := range map[string]string{"Retry-After": after, prefix + "RateLimit-Remaining": remain, prefix + "RateLimit-Reset": reset} {
			if v != "" {
				h.Set(k, v)
			}
		}
		resp := &http.Response{StatusCode: code, Header: h}
		isRateLimited(resp)
		for attempt := 1; attempt <= p.Attempts; attempt++ {
			d, retry := p.waitFor(resp, attempt)
			if d < 0 {
				t.Fatalf("HTTP %d %v: a wait of %v", code, h, d)
			}
			if !retry {
				continue
			}
			asked, ok := askedWait(after, now)
			// A spent quota's reset is read on a 403 or 429; a 5xx is
			// retried on its Retry-After or with backoff.
			if !ok && remaining(h) == "0" && (code == http.StatusForbidden || code == http.StatusTooManyRequests) {
				if sec, err := strconv.ParseInt(strings.TrimSpace(h.Get(prefix+"RateLimit-Reset")), 10, 64); err == nil {
					ok = true
					switch {
					case sec > now.Unix()+int64(p.MaxWait/time.Second):
						asked = math.MaxInt64
					case sec < now.Unix()-1<<32:
						asked = -1 // long past
					default:
						asked = time.Unix(sec, 0).Sub(now)
					}
				}
			}
			if ok && asked > p.MaxWait && d <= p.MaxWait {
				t.Fatalf("HTTP %d %v asks for %v; waitFor gives %v, within MaxWait %v", code, h, asked, d, p.MaxWait)
			}
		}
	})
}

// FuzzFitBody: whatever the report holds (model, node and tensor names
// come from the files measured), the body FitBody cuts is never over its
// limit, is the body itself when that fits, keeps whole lines of the body
// when it keeps any, and stays valid UTF-8. Seeds: the pieces of
// TestFitBodyNeverOverLimitRandom.
func FuzzFitBody(f *testing.F) {
	f.Add("| a | b |\n|---|---|\n| 1 | 2 |\n", 12)
	f.Add("<details>\n<summary>s</summary>\n\n```\ncode\n```\n</details>\n", 30)
	f.Add("<b\nclass=x>\ntext é ü\n<!--\n-->\n`<details>`\n", 20)
	f.Add("~~~~\n```\n~~~~\n<details><details>\n", 0)
	f.Fuzz(func(t *testing.T, body string, limit int) {
		if limit < 0 || limit > 1<<20 || len(body) > 1<<16 {
			return
		}
		got := FitBody(body, limit)
		n := utf8.RuneCountInString(got)
		switch {
		case utf8.RuneCountInString(body) <= limit && got != body:
			t.Fatalf("a body of %d characters changed under a limit of %d", utf8.RuneCountInString(body), limit)
		case n > limit:
			t.Fatalf("%d characters over the limit %d", n, limit)
		case utf8.ValidString(body) && !utf8.ValidString(got):
			t.Fatalf("invalid UTF-8 from a valid body: %q", got)
		}
		if got == body {
			return
		}
		// A cut keeps a head of whole lines of the body, then only what
		// closes them (a fence, </details>, blank lines) and the note; a
		// limit too small for the note gets the note's head.
		lines := strings.SplitAfter(body, "\n")
		if lines[len(lines)-1] == "" {
			lines = lines[:len(lines)-1]
		}
		if strings.HasPrefix(strings.TrimPrefix(omitted(len(lines), "see the job summary"), "\n"), got) {
			return
		}
		k := 0
		for _, l := range lines {
			if !strings.HasPrefix(got[k:], l) {
				break
			}
			k += len(l)
		}
		for _, l := range strings.Split(strings.TrimSuffix(got[k:], "\n"), "\n") {
			if l != "" && l != "</details>" && strings.Trim(l, "`~") != "" && !(strings.HasPrefix(l, "… ") && strings.HasSuffix(l, " not shown: see the job summary")) {
				t.Fatalf("line %q after the kept head of %d bytes is not the body's:\n%s", l, k, got)
			}
		}
	})
}
