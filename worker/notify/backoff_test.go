package notify

import (
	"regexp"
	"testing"
	"time"
)

// The backoff formula d = min(cap, base·2^(n−1)), delay ∈ [d/2, d), checked
// at its ends (u = 0 gives d/2, u → 1 approaches d) against hand-computed
// doublings of 30 s: 30 s, 60 s, 120 s, 240 s, 480 s, then the 600 s cap.
func TestBackoffDoublesWithEqualJitterAndCap(t *testing.T) {
	base, capD := 30*time.Second, 10*time.Minute
	wantD := []time.Duration{30 * time.Second, time.Minute, 2 * time.Minute, 4 * time.Minute, 8 * time.Minute, 10 * time.Minute, 10 * time.Minute}
	for i, d := range wantD {
		n := i + 1
		if got := backoff(n, base, capD, 0); got != d/2 {
			t.Errorf("backoff(%d, u=0) = %v, want d/2 = %v", n, got, d/2)
		}
		hi := backoff(n, base, capD, 0.999999)
		if hi >= d || hi < d-d/1000 {
			t.Errorf("backoff(%d, u→1) = %v, want just under d = %v", n, hi, d)
		}
		if mid := backoff(n, base, capD, 0.5); mid != d/2+d/4 {
			t.Errorf("backoff(%d, u=0.5) = %v, want 3d/4 = %v", n, mid, d/2+d/4)
		}
	}
	// Far past the cap, no overflow: still within [cap/2, cap).
	for _, n := range []int{64, 1000, 1 << 30} {
		if got := backoff(n, base, capD, 0.3); got < capD/2 || got >= capD {
			t.Errorf("backoff(%d) = %v, want within [%v, %v)", n, got, capD/2, capD)
		}
	}
	// Out-of-range inputs are clamped, never negative.
	if got := backoff(0, base, capD, -1); got != base/2 {
		t.Errorf("backoff(0, u=-1) = %v, want %v", got, base/2)
	}
	if got := backoff(1, base, capD, 7); got >= base {
		t.Errorf("backoff(1, u=7) = %v, want below %v", got, base)
	}
}

// RFC 4231 §4.3 (test case 2): HMAC-SHA-256 with key "Jefe" of "what do ya
// want for nothing?" (value checked with `openssl dgst -sha256 -hmac Jefe`).
func TestSignMatchesRFC4231(t *testing.T) {
	const want = "sha256=5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
	if got := Sign("Jefe", []byte("what do ya want for nothing?")); got != want {
		t.Errorf("Sign = %s, want %s", got, want)
	}
}

// RFC 5322 §3.6.4: msg-id = "<" id-left "@" id-right ">", both sides
// dot-atom-text (atext characters separated by single dots).
var dotAtom = regexp.MustCompile("^[A-Za-z0-9!#$%&'*+/=?^_`{|}~-]+(\\.[A-Za-z0-9!#$%&'*+/=?^_`{|}~-]+)*$")

func TestMessageIDIsStableAndWellFormed(t *testing.T) {
	cfgs := []Config{
		{DashboardURL: "https://halfmark.hospital.example:8443/x", From: "h@mail.example"},
		{From: "Halfmark <h@mail.example>"},
		{DashboardURL: "http://[::1]:8080"},
		{},
	}
	for _, cfg := range cfgs {
		for _, key := range []string{"finding:42:level:3:email", "digest:2026-12-02:webhook", "odd key: with spaces..and dots"} {
			id := messageID(key, cfg)
			if id != messageID(key, cfg) {
				t.Fatalf("messageID(%q) is not stable", key)
			}
			left, right, ok := cut(id)
			if !ok || !dotAtom.MatchString(left) || !dotAtom.MatchString(right) {
				t.Errorf("messageID(%q, %v) = %q is not an RFC 5322 msg-id", key, cfg.DashboardURL, id)
			}
		}
	}
	if a, b := messageID("finding:1:level:3:email", Config{}), messageID("finding:1:level:2:email", Config{}); a == b {
		t.Errorf("two dedupe keys share the Message-ID %q", a)
	}
	if got := messageID("finding:42:level:3:email", cfgs[0]); got != "halfmark.finding.42.level.3.email@halfmark.hospital.example" {
		t.Errorf("messageID = %q", got)
	}
	if got := messageID("x", cfgs[1]); got != "halfmark.x@mail.example" {
		t.Errorf("messageID from the sender's domain = %q", got)
	}
}

func cut(id string) (left, right string, ok bool) {
	for i := len(id) - 1; i >= 0; i-- {
		if id[i] == '@' {
			return id[:i], id[i+1:], true
		}
	}
	return "", "", false
}
