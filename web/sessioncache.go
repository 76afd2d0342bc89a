package web

import (
	"sync"
	"time"

	"halfmark"
)

// sessionCacheTTL is how long a session lookup is reused in this process.
// It spares the database one query per page; the cost is that a sign-out
// made through another replica, or a role change, takes effect here up to
// this long later (a sign-out through this process takes effect at once).
const sessionCacheTTL = 15 * time.Second

// sessionCacheMax bounds the cache; when full it is emptied.
const sessionCacheMax = 10000

type cachedSession struct {
	user  halfmark.User
	until time.Time
}

type sessionCache struct {
	mu sync.Mutex
	m  map[string]cachedSession
}

func (c *sessionCache) get(token string, now time.Time) (halfmark.User, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	e, ok := c.m[token]
	if !ok || now.After(e.until) {
		return halfmark.User{}, false
	}
	return e.user, true
}

func (c *sessionCache) put(token string, u halfmark.User, now time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.m == nil || len(c.m) >= sessionCacheMax {
		c.m = make(map[string]cachedSession)
	}
	c.m[token] = cachedSession{user: u, until: now.Add(sessionCacheTTL)}
}

func (c *sessionCache) drop(token string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	delete(c.m, token)
}
