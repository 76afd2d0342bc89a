package notify

import (
	"bytes"
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/base64"
	"errors"
	"io"
	"log/slog"
	"math/big"
	"mime"
	"mime/quotedprintable"
	"net"
	"net/http"
	"net/http/httptest"
	"net/mail"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/emersion/go-sasl"
	"github.com/emersion/go-smtp"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// newPool gives the test a migrated throw-away database.
func newPool(t *testing.T) *pgxpool.Pool {
	t.Helper()
	url := dbtest.New(t)
	ctx := context.Background()
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatalf("migrate: %v", err)
	}
	pool, err := pgxpool.New(ctx, url)
	if err != nil {
		t.Fatalf("pool: %v", err)
	}
	t.Cleanup(pool.Close)
	return pool
}

// enqueue runs EnqueueAlert in its own committed transaction.
func enqueue(t *testing.T, pool *pgxpool.Pool, al halfmark.Alert, cfg Config) {
	t.Helper()
	err := pgx.BeginFunc(context.Background(), pool, func(tx pgx.Tx) error {
		return EnqueueAlert(context.Background(), tx, al, cfg)
	})
	if err != nil {
		t.Fatalf("EnqueueAlert: %v", err)
	}
}

type outboxState struct {
	ID            int64
	Channel       string
	Key           string
	Attempts      int
	NextAttemptAt time.Time
	DeliveredAt   *time.Time
	LastError     *string
}

func outboxRows(t *testing.T, pool *pgxpool.Pool) []outboxState {
	t.Helper()
	rows, err := pool.Query(context.Background(),
		`SELECT id, channel, dedupe_key, attempts, next_attempt_at, delivered_at, last_error FROM outbox ORDER BY id`)
	if err != nil {
		t.Fatal(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (outboxState, error) {
		var s outboxState
		err := r.Scan(&s.ID, &s.Channel, &s.Key, &s.Attempts, &s.NextAttemptAt, &s.DeliveredAt, &s.LastError)
		return s, err
	})
	if err != nil {
		t.Fatal(err)
	}
	return out
}

// clock is a simulated clock for Config.Now.
type clock struct {
	mu sync.Mutex
	t  time.Time
}

func newClock() *clock { return &clock{t: time.Now().Truncate(time.Second)} }

func (c *clock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *clock) Advance(d time.Duration) time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
	return c.t
}

// testTLS makes a self-signed ECDSA P-256 certificate for 127.0.0.1 and
// returns the server's TLS configuration and a client configuration that
// trusts only that certificate.
func testTLS(t *testing.T) (server, client *tls.Config) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber:          big.NewInt(1),
		Subject:               pkix.Name{CommonName: "halfmark test SMTP"},
		NotBefore:             time.Now().Add(-time.Hour),
		NotAfter:              time.Now().Add(24 * time.Hour),
		IPAddresses:           []net.IP{net.IPv4(127, 0, 0, 1)},
		KeyUsage:              x509.KeyUsageDigitalSignature | x509.KeyUsageCertSign,
		ExtKeyUsage:           []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
		BasicConstraintsValid: true,
		IsCA:                  true,
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	cert, err := x509.ParseCertificate(der)
	if err != nil {
		t.Fatal(err)
	}
	pool := x509.NewCertPool()
	pool.AddCert(cert)
	server = &tls.Config{Certificates: []tls.Certificate{{Certificate: [][]byte{der}, PrivateKey: key}}, MinVersion: tls.VersionTLS12}
	client = &tls.Config{RootCAs: pool, MinVersion: tls.VersionTLS12}
	return server, client
}

// receivedMail is one message accepted by the test SMTP server.
type receivedMail struct {
	From  string
	Rcpts []string
	Raw   []byte
	TLS   bool // the DATA command arrived over TLS
	User  string
}

// Header returns a decoded header (RFC 2047 encoded words decoded with the
// standard library).
func (m receivedMail) Header(t *testing.T, name string) string {
	t.Helper()
	msg, err := mail.ReadMessage(bytes.NewReader(m.Raw))
	if err != nil {
		t.Fatalf("parse the received message: %v", err)
	}
	v, err := new(mime.WordDecoder).DecodeHeader(msg.Header.Get(name))
	if err != nil {
		t.Fatalf("decode header %s: %v", name, err)
	}
	return v
}

// Body returns the decoded text body (RFC 2045 quoted-printable or base64).
func (m receivedMail) Body(t *testing.T) string {
	t.Helper()
	msg, err := mail.ReadMessage(bytes.NewReader(m.Raw))
	if err != nil {
		t.Fatalf("parse the received message: %v", err)
	}
	var r io.Reader = msg.Body
	switch strings.ToLower(msg.Header.Get("Content-Transfer-Encoding")) {
	case "quoted-printable":
		r = quotedprintable.NewReader(r)
	case "base64":
		r = base64.NewDecoder(base64.StdEncoding, r)
	}
	b, err := io.ReadAll(r)
	if err != nil {
		t.Fatalf("decode the body: %v", err)
	}
	return strings.ReplaceAll(string(b), "\r\n", "\n")
}

// mailServer is a real SMTP server (go-smtp) on 127.0.0.1 that offers
// STARTTLS with a test certificate and, when user is set, requires AUTH
// PLAIN.
type mailServer struct {
	t        *testing.T
	port     int
	tls      *tls.Config // nil: no STARTTLS offered
	user, pw string

	mu   sync.Mutex
	msgs []receivedMail
	srv  *smtp.Server
	l    net.Listener
}

func newMailServer(t *testing.T, serverTLS *tls.Config) *mailServer {
	s := &mailServer{t: t, tls: serverTLS}
	s.Start()
	t.Cleanup(s.Stop)
	return s
}

// Start listens on the server's port (a fresh one the first time).
func (s *mailServer) Start() {
	s.t.Helper()
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.srv != nil {
		return
	}
	addr := "127.0.0.1:" + strconv.Itoa(s.port)
	var l net.Listener
	var err error
	for i := 0; i < 50; i++ { // a just-closed port can take a moment to free
		if l, err = net.Listen("tcp", addr); err == nil {
			break
		}
		time.Sleep(20 * time.Millisecond)
	}
	if err != nil {
		s.t.Fatalf("SMTP listen on %s: %v", addr, err)
	}
	s.port = l.Addr().(*net.TCPAddr).Port
	srv := smtp.NewServer(smtp.BackendFunc(func(c *smtp.Conn) (smtp.Session, error) {
		return &mailSession{s: s, c: c}, nil
	}))
	srv.Domain = "127.0.0.1"
	srv.TLSConfig = s.tls
	srv.ReadTimeout = 10 * time.Second
	srv.WriteTimeout = 10 * time.Second
	srv.ErrorLog = discardLogger{}
	s.srv, s.l = srv, l
	go func() { _ = srv.Serve(l) }()
}

// Stop closes the listener and every open connection: the server is down.
func (s *mailServer) Stop() {
	s.mu.Lock()
	srv, l := s.srv, s.l
	s.srv, s.l = nil, nil
	s.mu.Unlock()
	if srv != nil {
		// Close the listener too: Serve may not have registered it yet.
		_ = l.Close()
		_ = srv.Close()
	}
}

func (s *mailServer) Messages() []receivedMail {
	s.mu.Lock()
	defer s.mu.Unlock()
	return append([]receivedMail(nil), s.msgs...)
}

type discardLogger struct{}

func (discardLogger) Printf(string, ...interface{}) {}
func (discardLogger) Println(...interface{})        {}

type mailSession struct {
	s     *mailServer
	c     *smtp.Conn
	from  string
	rcpts []string
	user  string
}

func (m *mailSession) AuthMechanisms() []string {
	if m.s.user == "" {
		return nil
	}
	return []string{sasl.Plain}
}

func (m *mailSession) Auth(mech string) (sasl.Server, error) {
	return sasl.NewPlainServer(func(identity, username, password string) error {
		if username != m.s.user || password != m.s.pw {
			return errors.New("invalid username or password")
		}
		m.user = username
		return nil
	}), nil
}

func (m *mailSession) Mail(from string, _ *smtp.MailOptions) error {
	if m.s.user != "" && m.user == "" {
		return smtp.ErrAuthRequired
	}
	m.from = from
	return nil
}

func (m *mailSession) Rcpt(to string, _ *smtp.RcptOptions) error {
	m.rcpts = append(m.rcpts, to)
	return nil
}

func (m *mailSession) Data(r io.Reader) error {
	b, err := io.ReadAll(r)
	if err != nil {
		return err
	}
	_, isTLS := m.c.TLSConnectionState()
	m.s.mu.Lock()
	m.s.msgs = append(m.s.msgs, receivedMail{From: m.from, Rcpts: m.rcpts, Raw: b, TLS: isTLS, User: m.user})
	m.s.mu.Unlock()
	return nil
}

func (m *mailSession) Reset()        { m.from, m.rcpts = "", nil }
func (m *mailSession) Logout() error { return nil }

// hook is a webhook receiver. While down it answers 503 and counts the
// refused request.
type hook struct {
	srv     *httptest.Server
	down    atomic.Bool
	refused atomic.Int64
	delay   time.Duration

	mu   sync.Mutex
	reqs []hookRequest
}

type hookRequest struct {
	Header http.Header
	Body   []byte
}

func newHook(t *testing.T) *hook {
	h := &hook{}
	h.srv = httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		body, _ := io.ReadAll(r.Body)
		if h.delay > 0 {
			time.Sleep(h.delay)
		}
		if h.down.Load() || r.Method != http.MethodPost {
			h.refused.Add(1)
			http.Error(w, "receiver down", http.StatusServiceUnavailable)
			return
		}
		h.mu.Lock()
		h.reqs = append(h.reqs, hookRequest{Header: r.Header.Clone(), Body: body})
		h.mu.Unlock()
		w.WriteHeader(http.StatusNoContent)
	}))
	t.Cleanup(h.srv.Close)
	return h
}

func (h *hook) Requests() []hookRequest {
	h.mu.Lock()
	defer h.mu.Unlock()
	return append([]hookRequest(nil), h.reqs...)
}

// baseConfig points at the two test receivers with STARTTLS required.
func baseConfig(ms *mailServer, clientTLS *tls.Config, h *hook, clk *clock) Config {
	cfg := Config{
		SMTPHost:      "127.0.0.1",
		SMTPPort:      ms.port,
		From:          "halfmark@physics.example",
		TLSPolicy:     TLSMandatory,
		TLSConfig:     clientTLS,
		WebhookSecret: "webhook-test-secret",
		Recipients: map[halfmark.Level][]string{
			halfmark.LevelInspect:   {"physics-digest@physics.example"},
			halfmark.LevelScheduled: {"physics@physics.example"},
			halfmark.LevelImmediate: {"physics@physics.example", "oncall@physics.example"},
		},
		DashboardURL: "https://halfmark.physics.example",
		BaseBackoff:  30 * time.Second,
		MaxBackoff:   10 * time.Minute,
	}
	if h != nil {
		cfg.WebhookURL = h.srv.URL + "/hooks/halfmark"
	}
	if clk != nil {
		cfg.Now = clk.Now
	}
	return cfg
}

func testLogger(t *testing.T) (*slog.Logger, *syncBuffer) {
	var b syncBuffer
	return slog.New(slog.NewTextHandler(&b, &slog.HandlerOptions{Level: slog.LevelDebug})), &b
}

type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

func ptr[T any](v T) *T { return &v }

// level3Alert is a jaw edge beyond its action limit.
func level3Alert() halfmark.Alert {
	opened := time.Date(2026, 12, 1, 7, 42, 0, 0, time.UTC)
	return halfmark.Alert{
		ID: 42, MachineID: 3, MachineName: "Linac A", BeamID: 7, BeamLabel: "6 MV",
		SeriesID: ptr(int64(11)), Edge: "X2", Quantity: halfmark.QPosition, Geometry: "SSD 100 cm, 10x10 cm",
		Family: "limit", Rule: "beyond action limit", Level: halfmark.LevelImmediate, State: halfmark.AlertOpen,
		Message:     "X2 jaw of Linac A 6 MV is 2.40 mm from baseline, beyond the 2.00 mm action limit.",
		DeviationMM: ptr(2.4), ToleranceMM: ptr(1.0), ActionMM: ptr(2.0),
		ProjectedCrossing: ptr(time.Date(2026, 12, 9, 0, 0, 0, 0, time.UTC)),
		OpenedAt:          opened, UpdatedAt: opened,
	}
}
