package web

import "testing"

// localPath is the one rule for every redirect target taken from a request
// (sign-in next=, the alert forms' back=): a same-site path after every
// round of percent-decoding, with no tab, newline, backslash, space or
// leading "//" (WHATWG URL Standard, basic URL parser: tabs and newlines are
// removed and "\" is read as "/", so "/\t/evil.example" is "//evil.example").
func TestLocalPath(t *testing.T) {
	for _, p := range []string{"/\t/evil.example", "/\n/evil.example", "/\r/evil.example", "/\\evil.example", "//evil.example",
		"/%2F/evil.example", "/%09/evil.example", "/%5Cevil.example", "/%252F%252Fevil.example", "https://evil.example",
		"evil.example", "", " /x", "/\u0085/evil.example", "/%zz"} {
		if got := localPath(p); got != "/" {
			t.Errorf("localPath(%q) = %q; want /", p, got)
		}
	}
	for _, p := range []string{"/", "/series/3", "/series/3?from=2026-01&to=2026-02", "/machines/1/report?month=2026-01"} {
		if got := localPath(p); got != p {
			t.Errorf("localPath(%q) = %q; want it unchanged", p, got)
		}
	}
}
