package web

import (
	"strings"
	"sync"
	"time"

	"halfmark"
)

// signInGuard slows password guessing without letting a stranger lock a
// user out: failures are counted per (account, client address) and per
// client address, never per account alone. After
// halfmark.MaxFailedSignIns failures for one account from one address, that
// address must wait before trying that account again; after
// addrFailuresFree failures from one address over any accounts, that address
// must wait before any sign-in. Each further failure doubles the wait,
// from signInBackoffBase up to halfmark.LockoutDuration; a success clears
// both counts. The user at another address is never held up. While held
// up, the answer is the same "e-mail or password is wrong" as for an unknown
// account, so the answer tells nobody which accounts exist. OWASP
// Authentication Cheat Sheet, "Protect Against Automated Attacks"
// (throttling per account and per address; common practice). The counts
// live in this process: with several replicas each keeps its own.
type signInGuard struct {
	mu    sync.Mutex
	fails map[string]*failures
}

type failures struct {
	n     int
	until time.Time // no attempt before this time
	last  time.Time
}

const (
	addrFailuresFree  = 20
	signInBackoffBase = 30 * time.Second
	signInForget      = 24 * time.Hour // counts idle this long are dropped
)

func accountKey(email, addr string) string {
	return "a\x00" + strings.ToLower(strings.TrimSpace(email)) + "\x00" + addr
}
func addrKey(addr string) string { return "i\x00" + addr }

// blocked reports whether a sign-in to email from addr must wait.
func (g *signInGuard) blocked(email, addr string, now time.Time) bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	for _, k := range []string{accountKey(email, addr), addrKey(addr)} {
		if f := g.fails[k]; f != nil && now.Before(f.until) {
			return true
		}
	}
	return false
}

// failed counts one failure and sets the waits.
func (g *signInGuard) failed(email, addr string, now time.Time) {
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.fails == nil {
		g.fails = map[string]*failures{}
	}
	if len(g.fails) > 100000 {
		for k, f := range g.fails {
			if now.Sub(f.last) > signInForget {
				delete(g.fails, k)
			}
		}
	}
	for _, kf := range []struct {
		k    string
		free int
	}{{accountKey(email, addr), halfmark.MaxFailedSignIns - 1}, {addrKey(addr), addrFailuresFree - 1}} {
		f := g.fails[kf.k]
		if f == nil || now.Sub(f.last) > signInForget {
			f = &failures{}
			g.fails[kf.k] = f
		}
		f.n++
		f.last = now
		if over := f.n - kf.free; over > 0 {
			f.until = now.Add(backoff(over))
		}
	}
}

// succeeded clears the counts of email at addr and of addr.
func (g *signInGuard) succeeded(email, addr string) {
	g.mu.Lock()
	defer g.mu.Unlock()
	delete(g.fails, accountKey(email, addr))
	delete(g.fails, addrKey(addr))
}

// backoff is signInBackoffBase·2^(over−1), at most LockoutDuration.
func backoff(over int) time.Duration {
	d := signInBackoffBase
	for i := 1; i < over && d < halfmark.LockoutDuration; i++ {
		d *= 2
	}
	if d > halfmark.LockoutDuration {
		d = halfmark.LockoutDuration
	}
	return d
}
