package action

import (
	"math"
	"net/http"
	"strconv"
	"strings"
	"testing"
	"time"
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
			if !ok && remaining(h) == "0" {
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
