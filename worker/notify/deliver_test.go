package notify

import (
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"halfmark"
	"halfmark/db"
)

// verifySignature checks X-Halfmark-Signature the way a receiver would,
// with crypto/hmac directly (RFC 2104 HMAC over SHA-256) and a
// constant-time comparison.
func verifySignature(t *testing.T, secret string, r hookRequest) {
	t.Helper()
	sig := r.Header.Get(HeaderSignature)
	hexSig, ok := strings.CutPrefix(sig, "sha256=")
	if !ok {
		t.Fatalf("%s = %q, want the form sha256=<hex>", HeaderSignature, sig)
	}
	got, err := hex.DecodeString(hexSig)
	if err != nil {
		t.Fatalf("%s is not hex: %v", HeaderSignature, err)
	}
	m := hmac.New(sha256.New, []byte(secret))
	m.Write(r.Body)
	if !hmac.Equal(got, m.Sum(nil)) {
		t.Fatalf("webhook signature does not verify with the shared secret")
	}
}

func TestSMTPDownThenUpDeliversExactlyOnce(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	ms.Stop() // the port is known, nothing listens on it
	clk := newClock()
	st.Now = clk.Now
	cfg := baseConfig(ms, cliTLS, nil, clk)
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	d := New(st, cfg, nil)

	t0 := clk.Now()
	n, err := d.RunOnce(ctx)
	if err == nil || n != 0 {
		t.Fatalf("RunOnce with the SMTP server down = %d, %v; want 0 and an error", n, err)
	}
	rows := outboxRows(t, st)
	if len(rows) != 1 {
		t.Fatalf("%d rows", len(rows))
	}
	r := rows[0]
	if r.Attempts != 1 || r.DeliveredAt != nil || r.LastError == "" {
		t.Fatalf("after a failure: attempts %d delivered_at %v last_error %v", r.Attempts, r.DeliveredAt, r.LastError)
	}
	// First retry delay: d = BaseBackoff, delay ∈ [d/2, d) (equal jitter).
	delay := r.NextAttemptAt.Sub(t0)
	if delay < cfg.BaseBackoff/2 || delay >= cfg.BaseBackoff {
		t.Fatalf("next_attempt_at is %v after the failure, want within [%v, %v)", delay, cfg.BaseBackoff/2, cfg.BaseBackoff)
	}

	// Not due yet: nothing is tried.
	if n, err := d.RunOnce(ctx); n != 0 || err != nil {
		t.Fatalf("RunOnce before the retry is due = %d, %v; want 0, nil", n, err)
	}
	if rows := outboxRows(t, st); rows[0].Attempts != 1 {
		t.Fatalf("a row that was not due was tried: attempts %d", rows[0].Attempts)
	}

	// Second failure: d = 2·BaseBackoff.
	t1 := clk.Advance(cfg.BaseBackoff)
	if _, err := d.RunOnce(ctx); err == nil {
		t.Fatal("RunOnce with the SMTP server still down succeeded")
	}
	r = outboxRows(t, st)[0]
	if delay := r.NextAttemptAt.Sub(t1); r.Attempts != 2 || delay < cfg.BaseBackoff || delay >= 2*cfg.BaseBackoff {
		t.Fatalf("after the second failure: attempts %d, next attempt in %v; want 2 and within [%v, %v)",
			r.Attempts, delay, cfg.BaseBackoff, 2*cfg.BaseBackoff)
	}

	ms.Start()
	clk.Advance(2 * cfg.BaseBackoff)
	if n, err := d.RunOnce(ctx); n != 1 || err != nil {
		t.Fatalf("RunOnce with the server back = %d, %v; want 1, nil", n, err)
	}
	for i := 0; i < 3; i++ {
		clk.Advance(time.Hour)
		if n, err := d.RunOnce(ctx); n != 0 || err != nil {
			t.Fatalf("RunOnce after delivery = %d, %v; want 0, nil", n, err)
		}
	}
	if got := len(ms.Messages()); got != 1 {
		t.Fatalf("SMTP server got %d messages, want exactly 1", got)
	}
	r = outboxRows(t, st)[0]
	if r.DeliveredAt == nil || r.Attempts != 3 || r.LastError != "" {
		t.Fatalf("after delivery: delivered_at %v attempts %d last_error %v", r.DeliveredAt, r.Attempts, r.LastError)
	}
}

// An hour of simulated time with both receivers down, in one-minute steps:
// every failed attempt is rescheduled within its backoff window, the retries
// thin out as the delay doubles, and once the receivers are back each
// notification arrives exactly once.
func TestAnHourOfOutageThenRecovery(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	ms.Stop()
	h := newHook(t)
	h.down.Store(true)
	clk := newClock()
	st.Now = clk.Now
	cfg := baseConfig(ms, cliTLS, h, clk) // base 30 s, cap 10 min
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	d := New(st, cfg, nil)

	const step = time.Minute
	lastAttempts := map[string]int{}
	for minute := 0; minute < 60; minute++ {
		now := clk.Now()
		if n, _ := d.RunOnce(ctx); n != 0 {
			t.Fatalf("minute %d: %d delivered while the receivers are down", minute, n)
		}
		for _, r := range outboxRows(t, st) {
			if r.Attempts == lastAttempts[r.DedupeKey] {
				continue // not due this minute
			}
			if r.Attempts != lastAttempts[r.DedupeKey]+1 {
				t.Fatalf("minute %d: %s went from %d to %d attempts in one run", minute, r.DedupeKey, lastAttempts[r.DedupeKey], r.Attempts)
			}
			lastAttempts[r.DedupeKey] = r.Attempts
			// d = min(cap, base·2^(n−1)); delay ∈ [d/2, d).
			dmax := min(cfg.MaxBackoff, cfg.BaseBackoff<<(min(r.Attempts, 20)-1))
			if delay := r.NextAttemptAt.Sub(now); delay < dmax/2 || delay >= dmax {
				t.Fatalf("minute %d: %s attempt %d rescheduled %v ahead, want within [%v, %v)",
					minute, r.DedupeKey, r.Attempts, delay, dmax/2, dmax)
			}
		}
		clk.Advance(step)
	}
	// Bounds from the formula, base 30 s, cap 10 min, one-minute steps: a
	// row is tried at the first step at or after now + delay, so the gap
	// after failure k is ceil(delay_k) minutes with delay_k ∈ [d_k/2, d_k),
	// d_k = 0.5, 1, 2, 4, 8, 10, 10, … min.
	// Longest gaps 1, 1, 2, 4, 8, 10, 10, 10, 10 → attempts at minutes ≤ 0, 1,
	// 2, 4, 8, 16, 26, 36, 46, 56: at least 10 attempts in minutes 0–59.
	// Shortest gaps 1, 1, 1, 2, 4, 5, 5, … → attempts at minutes ≥ 0, 1, 2, 3,
	// 5, 9, 14, 19, …, 54, 59: at most 16.
	for key, n := range lastAttempts {
		if n < 10 || n > 16 {
			t.Errorf("%s: %d attempts in an hour of outage, want between 10 and 16", key, n)
		}
	}
	if got := h.refused.Load(); int(got) != lastAttempts["finding:42:level:3:webhook"] {
		t.Errorf("the webhook receiver refused %d requests, the outbox counted %d attempts", got, lastAttempts["finding:42:level:3:webhook"])
	}
	if len(ms.Messages()) != 0 || len(h.Requests()) != 0 {
		t.Fatal("something was delivered during the outage")
	}

	ms.Start()
	h.down.Store(false)
	// Within one capped delay (plus a step) both are delivered.
	total := 0
	for minute := 0; minute <= int(cfg.MaxBackoff/step)+1; minute++ {
		n, _ := d.RunOnce(ctx)
		total += n
		clk.Advance(step)
	}
	// And a further hour sends nothing more.
	for minute := 0; minute < 60; minute++ {
		n, err := d.RunOnce(ctx)
		if err != nil {
			t.Fatal(err)
		}
		total += n
		clk.Advance(step)
	}
	if total != 2 || len(ms.Messages()) != 1 || len(h.Requests()) != 1 {
		t.Fatalf("after recovery: %d delivered, %d e-mails, %d webhooks; want 2, 1, 1", total, len(ms.Messages()), len(h.Requests()))
	}
	verifySignature(t, cfg.WebhookSecret, h.Requests()[0])
	for _, r := range outboxRows(t, st) {
		if r.DeliveredAt == nil || r.Attempts != lastAttempts[r.DedupeKey]+1 {
			t.Errorf("%s: delivered_at %v, attempts %d (want %d)", r.DedupeKey, r.DeliveredAt, r.Attempts, lastAttempts[r.DedupeKey]+1)
		}
	}
}

func TestGivesUpAfterMaxAttempts(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	h := newHook(t)
	h.down.Store(true)
	clk := newClock()
	st.Now = clk.Now
	cfg := Config{WebhookURL: h.srv.URL, WebhookSecret: "s", MaxAttempts: 3, BaseBackoff: time.Second, MaxBackoff: time.Second, Now: clk.Now}
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	d := New(st, cfg, nil)
	for i := 0; i < 10; i++ {
		_, _ = d.RunOnce(ctx)
		clk.Advance(time.Minute)
	}
	if got := h.refused.Load(); got != 3 {
		t.Fatalf("%d attempts, want MaxAttempts = 3", got)
	}
	r := outboxRows(t, st)[0]
	if r.Attempts != 3 || r.DeliveredAt != nil || !strings.Contains(r.LastError, "503") {
		t.Fatalf("given-up row: attempts %d delivered_at %v last_error %v", r.Attempts, r.DeliveredAt, r.LastError)
	}
}

// Two deliverers on the same rows at the same time: with FOR UPDATE SKIP
// LOCKED each row is sent by exactly one of them.
func TestConcurrentDeliverersSendEachRowOnce(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	h := newHook(t)
	h.delay = 5 * time.Millisecond // widen the window in which both could pick the same row
	cfg := baseConfig(ms, cliTLS, h, nil)
	const findings = 15
	for i := 1; i <= findings; i++ {
		enqueue(t, st, storedFinding(int64(i), halfmark.LevelImmediate), cfg)
	}

	var wg sync.WaitGroup
	counts := make([]int, 2)
	errs := make([]error, 2)
	for w := range 2 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			counts[w], errs[w] = New(st, cfg, nil).RunOnce(ctx)
		}()
	}
	wg.Wait()
	for w, err := range errs {
		if err != nil {
			t.Fatalf("deliverer %d: %v", w, err)
		}
	}
	if counts[0]+counts[1] != 2*findings {
		t.Fatalf("deliverers delivered %d + %d, want %d in all", counts[0], counts[1], 2*findings)
	}
	t.Logf("deliverer shares: %d and %d", counts[0], counts[1])

	seen := map[string]int{}
	for _, m := range ms.Messages() {
		seen[m.Header(t, HeaderDelivery)]++
	}
	for _, r := range h.Requests() {
		verifySignature(t, cfg.WebhookSecret, r)
		seen[r.Header.Get(HeaderDelivery)]++
	}
	if len(seen) != 2*findings {
		t.Fatalf("%d distinct notifications arrived, want %d", len(seen), 2*findings)
	}
	for key, n := range seen {
		if n != 1 {
			t.Errorf("%s arrived %d times", key, n)
		}
	}
	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 0 || err != nil {
		t.Fatalf("a third RunOnce = %d, %v; want 0, nil", n, err)
	}
}

func TestMandatoryTLSRefusesAServerWithoutSTARTTLS(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	ms := newMailServer(t, nil) // plain-text server: no STARTTLS offered
	clk := newClock()
	st.Now = clk.Now
	cfg := baseConfig(ms, nil, nil, clk)
	cfg.TLSPolicy = "" // the default is mandatory
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	n, err := New(st, cfg, nil).RunOnce(ctx)
	if err == nil || n != 0 || !strings.Contains(err.Error(), "STARTTLS") {
		t.Fatalf("RunOnce against a server without STARTTLS = %d, %v; want a STARTTLS error", n, err)
	}
	if len(ms.Messages()) != 0 {
		t.Fatal("a message went out in clear text under the mandatory policy")
	}

	// Clear text only when configured so.
	cfg.TLSPolicy = TLSNone
	clk.Advance(time.Hour) // past the retry
	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 1 || err != nil {
		t.Fatalf("RunOnce with TLS policy none = %d, %v", n, err)
	}
	if m := ms.Messages(); len(m) != 1 || m[0].TLS {
		t.Fatalf("messages %d, want 1 in clear text", len(m))
	}
}

func TestSMTPAuthWithoutLeakingThePassword(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	ms.user, ms.pw = "halfmark", "correct-horse-battery-staple"
	clk := newClock()
	st.Now = clk.Now
	cfg := baseConfig(ms, cliTLS, nil, clk)
	cfg.SMTPUser, cfg.SMTPPassword = "halfmark", "wrong-password-value"
	log, logs := testLogger(t)
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)

	if n, err := New(st, cfg, log).RunOnce(ctx); n != 0 || err == nil {
		t.Fatalf("RunOnce with a wrong password = %d, %v; want a failure", n, err)
	} else if strings.Contains(err.Error(), cfg.SMTPPassword) {
		t.Fatalf("the error carries the password: %v", err)
	}
	r := outboxRows(t, st)[0]
	if r.LastError == "" || strings.Contains(r.LastError, cfg.SMTPPassword) {
		t.Fatalf("last_error %v is missing or carries the password", r.LastError)
	}

	cfg.SMTPPassword = ms.pw
	clk.Advance(time.Hour) // past the retry
	d := New(st, cfg, log)
	log.Info("deliverer configured", "config", cfg)
	if n, err := d.RunOnce(ctx); n != 1 || err != nil {
		t.Fatalf("RunOnce with the right password = %d, %v", n, err)
	}
	if m := ms.Messages(); len(m) != 1 || m[0].User != "halfmark" || !m[0].TLS {
		t.Fatalf("messages %+v, want one authenticated over TLS", m)
	}
	for _, secret := range []string{"wrong-password-value", ms.pw, cfg.WebhookSecret} {
		if strings.Contains(logs.String(), secret) {
			t.Fatalf("the log carries a secret:\n%s", logs.String())
		}
	}
	if !strings.Contains(logs.String(), "notification delivered") {
		t.Fatalf("the delivery was not logged:\n%s", logs.String())
	}
}

func TestWebhookNon2xxAndRedirectAreFailures(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	h := newHook(t)
	h.down.Store(true) // answers 503
	clk := newClock()
	st.Now = clk.Now
	cfg := Config{WebhookURL: h.srv.URL + "/hook?token=sekret-token", WebhookSecret: "s", Now: clk.Now}
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	_, err := New(st, cfg, nil).RunOnce(ctx)
	if err == nil || !strings.Contains(err.Error(), "503") {
		t.Fatalf("RunOnce against a 503 = %v", err)
	}
	if strings.Contains(err.Error(), "sekret-token") {
		t.Fatalf("the error carries the URL's token: %v", err)
	}

	// A redirect is not followed: the signed body goes only where configured.
	h.down.Store(false)
	redirect := httptest.NewServer(http.RedirectHandler(h.srv.URL, http.StatusTemporaryRedirect))
	t.Cleanup(redirect.Close)
	cfg.WebhookURL = redirect.URL
	clk.Advance(time.Hour)
	_, err = New(st, cfg, nil).RunOnce(ctx)
	if err == nil || !strings.Contains(err.Error(), "307") {
		t.Fatalf("RunOnce against a redirect = %v", err)
	}
	if len(h.Requests()) != 0 {
		t.Fatal("the redirect was followed")
	}
}

// With the SMTP server unreachable, one e-mail row is tried and the others
// wait for a later run with their attempt counts untouched; the webhook
// rows, on a working receiver, are delivered meanwhile.
func TestUnreachableSMTPDoesNotHoldUpTheWebhook(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	ms.Stop()
	h := newHook(t)
	clk := newClock()
	st.Now = clk.Now
	cfg := baseConfig(ms, cliTLS, h, clk)
	for i := int64(1); i <= 3; i++ {
		enqueue(t, st, storedFinding(i, halfmark.LevelImmediate), cfg)
	}
	n, err := New(st, cfg, nil).RunOnce(ctx)
	if n != 3 || err == nil || !strings.Contains(err.Error(), "1 of 4 notifications failed;") {
		t.Fatalf("RunOnce = %d, %v; want the 3 webhooks delivered and 1 e-mail failure", n, err)
	}
	attempts := 0
	for _, r := range outboxRows(t, st) {
		if r.Channel == ChannelEmail {
			attempts += r.Attempts
		}
	}
	if attempts != 1 || len(h.Requests()) != 3 {
		t.Fatalf("e-mail attempts %d (want 1), webhooks %d (want 3)", attempts, len(h.Requests()))
	}

	ms.Start()
	clk.Advance(time.Minute)
	if n, err := New(st, cfg, nil).RunOnce(ctx); n != 3 || err != nil {
		t.Fatalf("RunOnce with the server back = %d, %v; want the 3 e-mails", n, err)
	}
	if len(ms.Messages()) != 3 {
		t.Fatalf("%d e-mails, want 3", len(ms.Messages()))
	}
}

// lostCommitStore is the real store whose first recording of each row's
// delivery is lost: the claim's transaction is rolled back instead of
// committed, as when the process or the database goes away between the
// send and the commit.
type lostCommitStore struct {
	*db.DB
	mu   sync.Mutex
	lost map[int64]bool
}

func (s *lostCommitStore) ClaimOutbox(ctx context.Context, due halfmark.OutboxDue) (halfmark.OutboxClaim, bool, error) {
	c, ok, err := s.DB.ClaimOutbox(ctx, due)
	if !ok || err != nil {
		return c, ok, err
	}
	return &lostCommitClaim{OutboxClaim: c, s: s}, true, nil
}

type lostCommitClaim struct {
	halfmark.OutboxClaim
	s *lostCommitStore
}

func (c *lostCommitClaim) Delivered(ctx context.Context, at time.Time) error {
	c.s.mu.Lock()
	first := !c.s.lost[c.Row().ID]
	c.s.lost[c.Row().ID] = true
	c.s.mu.Unlock()
	if first {
		c.Release(ctx)
		return errors.New("connection lost before COMMIT (simulated)")
	}
	return c.OutboxClaim.Delivered(ctx, at)
}

// The at-least-once window: a send accepted by the receivers whose
// delivery was never recorded is sent again, and the copy carries the same
// Message-ID and X-Halfmark-Delivery, so the receiving side can recognise
// it. This is why the README says at-least-once, not "never twice".
func TestResendAfterLostCommitCarriesTheSameIdentity(t *testing.T) {
	ctx := context.Background()
	st := newStore(t)
	srvTLS, cliTLS := testTLS(t)
	ms := newMailServer(t, srvTLS)
	h := newHook(t)
	cfg := baseConfig(ms, cliTLS, h, nil)
	enqueue(t, st, storedFinding(42, halfmark.LevelImmediate), cfg)
	d := New(&lostCommitStore{DB: st, lost: map[int64]bool{}}, cfg, nil)
	// The e-mail is accepted but its recording is lost: RunOnce stops with
	// a store error (EUnavailable) and the row stays undelivered.
	n, err := d.RunOnce(ctx)
	if n != 0 || halfmark.ErrorCodeOf(err) != halfmark.EUnavailable {
		t.Fatalf("RunOnce with a lost commit = %d, %v; want 0 and EUnavailable", n, err)
	}
	for _, r := range outboxRows(t, st) {
		if r.DeliveredAt != nil || r.Attempts != 0 {
			t.Fatalf("row %s after a lost commit: delivered_at %v attempts %d; want undelivered, 0", r.DedupeKey, r.DeliveredAt, r.Attempts)
		}
	}
	// The e-mail goes again (recorded this time); the webhook's first
	// recording is lost.
	if n, err := d.RunOnce(ctx); n != 1 || halfmark.ErrorCodeOf(err) != halfmark.EUnavailable {
		t.Fatalf("second RunOnce = %d, %v; want 1 and EUnavailable", n, err)
	}
	if n, err := d.RunOnce(ctx); n != 1 || err != nil {
		t.Fatalf("third RunOnce = %d, %v; want 1, nil", n, err)
	}
	msgs, reqs := ms.Messages(), h.Requests()
	if len(msgs) != 2 || len(reqs) != 2 {
		t.Fatalf("%d e-mails, %d webhooks; want 2 and 2 (each sent once more after its lost commit)", len(msgs), len(reqs))
	}
	if a, b := msgs[0].Header(t, "Message-ID"), msgs[1].Header(t, "Message-ID"); a == "" || a != b {
		t.Errorf("Message-IDs %q and %q differ", a, b)
	}
	if a, b := msgs[0].Header(t, HeaderDelivery), msgs[1].Header(t, HeaderDelivery); a != "finding:42:level:3:email" || a != b {
		t.Errorf("e-mail %s %q and %q, want both finding:42:level:3:email", HeaderDelivery, a, b)
	}
	if a, b := reqs[0].Header.Get(HeaderDelivery), reqs[1].Header.Get(HeaderDelivery); a != "finding:42:level:3:webhook" || a != b {
		t.Errorf("webhook %s %q and %q, want both finding:42:level:3:webhook", HeaderDelivery, a, b)
	}
	// Once recorded, nothing more is sent.
	if n, err := d.RunOnce(ctx); n != 0 || err != nil {
		t.Fatalf("RunOnce after delivery = %d, %v; want 0, nil", n, err)
	}
}
