package api

import (
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"
)

// SecurityHeaders sets, on every response of the server (API answers,
// problems, 404s and the dashboard, which may narrow the policy further): a
// Content-Security-Policy that loads nothing and allows no framing, no MIME
// sniffing, no referrer, and Strict-Transport-Security when the request came
// over TLS (directly, or through a trusted proxy that says so). OWASP Secure
// Headers Project (common practice); RFC 6797 (HSTS).
func SecurityHeaders(trusted []*net.IPNet) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			h := c.Response().Header()
			h.Set("Content-Security-Policy", "default-src 'none'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'")
			h.Set("X-Content-Type-Options", "nosniff")
			h.Set("X-Frame-Options", "DENY")
			h.Set("Referrer-Policy", "no-referrer")
			if OverTLS(c.Request(), trusted) {
				h.Set("Strict-Transport-Security", "max-age=31536000")
			}
			return next(c)
		}
	}
}

// OverTLS reports whether r reached the server over TLS: directly, or via a
// trusted proxy that sent X-Forwarded-Proto: https. The header of any other
// client is ignored.
func OverTLS(r *http.Request, trusted []*net.IPNet) bool {
	if r.TLS != nil {
		return true
	}
	return strings.EqualFold(r.Header.Get("X-Forwarded-Proto"), "https") && fromTrusted(r, trusted)
}

func fromTrusted(r *http.Request, trusted []*net.IPNet) bool {
	host, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		host = r.RemoteAddr
	}
	ip := net.ParseIP(host)
	for _, n := range trusted {
		if ip != nil && n.Contains(ip) {
			return true
		}
	}
	return false
}

// ClientIP is the server's rule for the client address (rate limits, logs):
// the socket's peer, unless that peer is a configured trusted proxy, in
// which case the nearest untrusted address of X-Forwarded-For. With no
// trusted proxy, a client cannot choose its address by sending a header.
func ClientIP(trusted []*net.IPNet) echo.IPExtractor {
	if len(trusted) == 0 {
		return echo.ExtractIPDirect()
	}
	opts := []echo.TrustOption{echo.TrustLoopback(false), echo.TrustLinkLocal(false), echo.TrustPrivateNet(false)}
	for _, n := range trusted {
		opts = append(opts, echo.TrustIPRange(n))
	}
	return echo.ExtractIPFromXFFHeader(opts...)
}

// ParseTrustedProxies reads a comma-separated list of addresses or CIDR
// ranges ("10.0.0.5, 192.168.1.0/24").
func ParseTrustedProxies(s string) ([]*net.IPNet, error) {
	var out []*net.IPNet
	for _, f := range strings.Split(s, ",") {
		f = strings.TrimSpace(f)
		if f == "" {
			continue
		}
		if !strings.Contains(f, "/") {
			ip := net.ParseIP(f)
			if ip == nil {
				return nil, fmt.Errorf("trusted proxy %q is not an IP address or CIDR range", f)
			}
			bits := 128
			if ip.To4() != nil {
				ip, bits = ip.To4(), 32
			}
			out = append(out, &net.IPNet{IP: ip, Mask: net.CIDRMask(bits, bits)})
			continue
		}
		_, n, err := net.ParseCIDR(f)
		if err != nil {
			return nil, fmt.Errorf("trusted proxy %q is not an IP address or CIDR range", f)
		}
		out = append(out, n)
	}
	return out, nil
}

// MaxRequestBody is the server-wide body limit (bytes), applied before any
// handler or middleware reads a form; upload routes raise it with
// RaiseBodyLimit once the caller is authenticated.
const MaxRequestBody = MaxBody

// LimitBody caps every request body at MaxRequestBody: a larger declared
// length is refused at once with 413, a body that runs over stops reading at
// the limit. Routes that accept uploads raise the cap after authentication
// (RaiseBodyLimit), so an anonymous request can never make the server read
// or spool more than MaxRequestBody bytes.
func LimitBody(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		r := c.Request()
		r.Body = &limitedBody{rc: r.Body, limit: MaxRequestBody, declared: r.ContentLength}
		if r.ContentLength > MaxRequestBody && !largeBodyRoute(r) {
			return echo.NewHTTPError(http.StatusRequestEntityTooLarge)
		}
		return next(c)
	}
}

// largeBodyRoute says whether r may carry more than MaxRequestBody once
// authenticated; its declared length is then checked by RaiseBodyLimit.
func largeBodyRoute(r *http.Request) bool {
	if r.Method != http.MethodPost {
		return false
	}
	switch r.URL.Path {
	case "/api/v1/checks/raw", "/api/v1/analyze/profile", "/api/v1/analyze/image", "/api/v1/analyze/picket",
		"/monthly/analyze", "/monthly/save":
		return true
	}
	return false
}

// RaiseBodyLimit lets the route it guards read up to n bytes of body. Put
// it after the authentication and role checks.
func RaiseBodyLimit(n int64) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			if b, ok := c.Request().Body.(interface{ RaiseLimit(int64) }); ok {
				b.RaiseLimit(n)
			}
			if c.Request().ContentLength > n {
				return echo.NewHTTPError(http.StatusRequestEntityTooLarge)
			}
			return next(c)
		}
	}
}

// limitedBody reads at most limit bytes, then fails with
// *http.MaxBytesError, like http.MaxBytesReader.
type limitedBody struct {
	rc       io.ReadCloser
	n, limit int64
	declared int64
}

func (b *limitedBody) RaiseLimit(n int64) {
	if n > b.limit {
		b.limit = n
	}
}

func (b *limitedBody) Read(p []byte) (int, error) {
	if b.n >= b.limit {
		// One byte more tells a body at the limit from one over it.
		var one [1]byte
		k, err := b.rc.Read(one[:])
		if k > 0 {
			return 0, &http.MaxBytesError{Limit: b.limit}
		}
		return 0, err
	}
	if rest := b.limit - b.n; int64(len(p)) > rest {
		p = p[:rest]
	}
	k, err := b.rc.Read(p)
	b.n += int64(k)
	return k, err
}

func (b *limitedBody) Close() error { return b.rc.Close() }

// isTooLarge reports whether err came from a body over its limit.
func isTooLarge(err error) bool {
	var mb *http.MaxBytesError
	return errors.As(err, &mb)
}
