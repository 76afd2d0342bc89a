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

	"halfmark"
	"halfmark/db"
	"halfmark/db/dbtest"
)

func TestMain(m *testing.M) { dbtest.Main(m) }

// newStore gives the test a migrated throw-away database.
func newStore(t *testing.T) *db.DB {
	t.Helper()
	url := dbtest.New(t)
	ctx := context.Background()
	if err := db.Migrate(ctx, url, nil); err != nil {
		t.Fatalf("migrate: %v", err)
	}
	st, err := db.Open(ctx, url)
	if err != nil {
		t.Fatalf("open: %v", err)
	}
	t.Cleanup(st.Close)
	return st
}

// newMachine stores a machine of the invented demo clinic and returns its id.
func newMachine(t *testing.T, st *db.DB, name string) int64 {
	t.Helper()
	m := halfmark.Machine{Name: name, SADcm: 100, MLCLeafPairs: 60, Clinical: true}
	if err := st.CreateMachine(context.Background(), halfmark.CLIActor("test"), &m); err != nil {
		t.Fatalf("create machine %s: %v", name, err)
	}
	return m.ID
}

// record stores one machine evaluation holding the given component
// verdicts (no series verdicts) through the real store, with n composing
// the notifications inside its transaction.
func record(t *testing.T, st *db.DB, machineID int64, at time.Time, n halfmark.FindingNotifier, cs ...halfmark.ComponentVerdict) {
	t.Helper()
	ev := &halfmark.MachineEvaluation{MachineID: machineID, At: at, ToleranceHash: "test", Components: cs}
	if err := st.RecordMachineEvaluation(context.Background(), ev, n); err != nil {
		t.Fatalf("RecordMachineEvaluation: %v", err)
	}
}

// activeFinding returns the machine's one active finding.
func activeFinding(t *testing.T, st *db.DB, machineID int64) halfmark.Finding {
	t.Helper()
	fs, err := st.Findings(context.Background(), halfmark.FindingFilter{MachineID: machineID})
	if err != nil {
		t.Fatal(err)
	}
	if len(fs) != 1 {
		t.Fatalf("machine %d has %d active findings, want 1", machineID, len(fs))
	}
	return fs[0]
}

// enqueue writes a stored finding's notifications (as composed by cfg)
// into the outbox through the store, as the delivery tests need them.
func enqueue(t *testing.T, st *db.DB, f halfmark.Finding, cfg Config) {
	t.Helper()
	if err := st.EnqueueNotifications(context.Background(), NewComposer(cfg).FindingNotifications(f)); err != nil {
		t.Fatalf("EnqueueNotifications: %v", err)
	}
}

func outboxRows(t *testing.T, st *db.DB) []halfmark.OutboxRow {
	t.Helper()
	rows, err := st.OutboxRows(context.Background(), 0)
	if err != nil {
		t.Fatal(err)
	}
	return rows
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

// bankFinding is the invented scenario's MLC fault: bank 2 of Heron
// offset outward after a service, seen in the EPID images of two beams.
// Values are invented for the test.
func bankFinding(level halfmark.Level) halfmark.Finding {
	onset := time.Date(2026, 11, 17, 0, 0, 0, 0, time.UTC)
	return halfmark.Finding{
		Component: halfmark.Component{Kind: halfmark.ComponentMLCBank, Name: "bank 2"},
		Direction: 1, Level: level,
		MagnitudeMM: 0.9, MagnitudeCIMM: [2]float64{0.72, 1.08},
		Onset:    &onset,
		Crossing: halfmark.FindingCrossing{Status: halfmark.CrossingAlreadyBeyond},
		Evidence: []halfmark.Evidence{
			{SeriesID: 101, Beam: "6 MV", Geometry: "SSD 100 cm, 20x20 cm", Method: halfmark.MethodEPID, Edge: "B2P29",
				Quantity: halfmark.QPosition, Rules: []string{"limit", "cusum"}, Level: level, DeviationMM: ptr(0.95)},
			{SeriesID: 102, Beam: "10 MV FFF", Geometry: "SSD 100 cm, 20x20 cm", Method: halfmark.MethodEPID, Edge: "B2P30",
				Quantity: halfmark.QPosition, Rules: []string{"shewhart"}, Level: halfmark.LevelInspect, DeviationMM: ptr(0.88)},
		},
		Message: "The mean of MLC bank 2 is 0.90 mm outward of its baseline since 2026-11-17.",
	}
}

// verdict is an active component verdict for f.
func verdict(f halfmark.Finding) halfmark.ComponentVerdict {
	return halfmark.ComponentVerdict{Finding: f, Active: true}
}

// storedFinding is bankFinding as the store returns it, for tests that
// enqueue directly.
func storedFinding(id int64, level halfmark.Level) halfmark.Finding {
	f := bankFinding(level)
	f.ID, f.MachineID, f.Machine, f.State = id, 2, "Heron", halfmark.FindingOpen
	f.OpenedAt = time.Date(2026, 12, 1, 7, 42, 0, 0, time.UTC)
	f.UpdatedAt = f.OpenedAt
	return f
}
