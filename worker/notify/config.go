package notify

import (
	"crypto/tls"
	"fmt"
	"log/slog"
	"net/mail"
	"net/url"
	"strconv"
	"strings"
	"time"

	"halfmark"
)

// TLS policies for the SMTP connection (Config.TLSPolicy).
const (
	// TLSMandatory refuses to send unless the server offers STARTTLS and the
	// handshake succeeds. It is the default.
	TLSMandatory = "mandatory"
	// TLSOpportunistic uses STARTTLS when offered and sends in clear text
	// otherwise.
	TLSOpportunistic = "opportunistic"
	// TLSNone never encrypts; only for a relay on the same host or network.
	TLSNone = "none"
)

// Defaults applied by New to zero Config fields.
const (
	DefaultSMTPPort    = 587 // message submission, RFC 6409 §3.1
	DefaultMaxAttempts = 48  // about two days of retries at DefaultMaxBackoff
	DefaultBaseBackoff = 30 * time.Second
	DefaultMaxBackoff  = time.Hour
	// WebhookTimeout bounds one webhook POST, connection included.
	WebhookTimeout = 10 * time.Second
	// SMTPTimeout bounds one SMTP connection and each command on it.
	SMTPTimeout = 30 * time.Second
)

// Config says where and how notifications go. The zero value sends
// nothing: without SMTPHost no e-mail is enqueued, without WebhookURL no
// webhook. SMTPPassword and WebhookSecret are never logged: String,
// GoString and LogValue redact them.
type Config struct {
	SMTPHost     string
	SMTPPort     int // 0: DefaultSMTPPort
	SMTPUser     string
	SMTPPassword string
	From         string // the sender address, required with SMTPHost
	// TLSPolicy is TLSMandatory ("" means mandatory), TLSOpportunistic or
	// TLSNone.
	TLSPolicy string
	// TLSConfig, when set, replaces the default TLS settings of the SMTP
	// connection, e.g. to trust a private certificate authority. An empty
	// ServerName is filled with SMTPHost.
	TLSConfig *tls.Config

	WebhookURL    string
	WebhookSecret string // key of the HMAC-SHA256 body signature

	// Recipients lists the e-mail addresses per level: LevelInspect for the
	// daily digest, LevelScheduled and LevelImmediate for the findings of
	// that level. A level without addresses gets no e-mail.
	Recipients map[halfmark.Level][]string

	// DashboardURL is the dashboard's base URL; links are
	// DashboardURL + "/findings/<id>", DashboardURL + "/findings" and
	// DashboardURL + "/machines/<id>".
	DashboardURL string
	// Location is the time zone dates are written in (nil: UTC).
	Location *time.Location

	MaxAttempts int           // attempts before a row is given up (0: DefaultMaxAttempts)
	BaseBackoff time.Duration // delay after the first failure (0: DefaultBaseBackoff)
	MaxBackoff  time.Duration // cap on the delay (0: DefaultMaxBackoff)
	// Now is the clock used for due times and delivery stamps (nil:
	// time.Now); tests drive it to simulate hours of retries.
	Now func() time.Time
}

// withDefaults fills the zero fields.
func (c Config) withDefaults() Config {
	if c.SMTPPort == 0 {
		c.SMTPPort = DefaultSMTPPort
	}
	if c.TLSPolicy == "" {
		c.TLSPolicy = TLSMandatory
	}
	if c.MaxAttempts <= 0 {
		c.MaxAttempts = DefaultMaxAttempts
	}
	if c.BaseBackoff <= 0 {
		c.BaseBackoff = DefaultBaseBackoff
	}
	if c.MaxBackoff <= 0 {
		c.MaxBackoff = DefaultMaxBackoff
	}
	if c.MaxBackoff < c.BaseBackoff {
		c.MaxBackoff = c.BaseBackoff
	}
	if c.Now == nil {
		c.Now = time.Now
	}
	if c.Location == nil {
		c.Location = time.UTC
	}
	return c
}

func (c Config) now() time.Time {
	if c.Now == nil {
		return time.Now()
	}
	return c.Now()
}

func (c Config) loc() *time.Location {
	if c.Location == nil {
		return time.UTC
	}
	return c.Location
}

// emailEnabled reports whether e-mail can be sent at all.
func (c Config) emailEnabled() bool { return c.SMTPHost != "" }

// ConfigFromEnv reads the configuration from environment variables through
// getenv (pass os.Getenv):
//
//	HALFMARK_SMTP_HOST, HALFMARK_SMTP_PORT (default 587), HALFMARK_SMTP_USER,
//	HALFMARK_SMTP_PASSWORD, HALFMARK_SMTP_FROM,
//	HALFMARK_SMTP_TLS (mandatory | opportunistic | none; default mandatory),
//	HALFMARK_WEBHOOK_URL, HALFMARK_WEBHOOK_SECRET,
//	HALFMARK_NOTIFY_LEVEL1, HALFMARK_NOTIFY_LEVEL2, HALFMARK_NOTIFY_LEVEL3
//	(comma-separated e-mail addresses), HALFMARK_DASHBOARD_URL.
//
// Every bad value is reported in one EInvalid error naming the variable.
// The error never contains the password or the webhook secret.
func ConfigFromEnv(getenv func(string) string) (Config, error) {
	get := func(k string) string { return strings.TrimSpace(getenv(k)) }
	var f halfmark.Fields
	c := Config{
		SMTPHost:      get("HALFMARK_SMTP_HOST"),
		SMTPUser:      get("HALFMARK_SMTP_USER"),
		SMTPPassword:  getenv("HALFMARK_SMTP_PASSWORD"), // spaces may belong to it
		From:          get("HALFMARK_SMTP_FROM"),
		TLSPolicy:     strings.ToLower(get("HALFMARK_SMTP_TLS")),
		WebhookURL:    get("HALFMARK_WEBHOOK_URL"),
		WebhookSecret: getenv("HALFMARK_WEBHOOK_SECRET"),
		DashboardURL:  strings.TrimRight(get("HALFMARK_DASHBOARD_URL"), "/"),
		Recipients:    map[halfmark.Level][]string{},
	}
	if p := get("HALFMARK_SMTP_PORT"); p != "" {
		n, err := strconv.Atoi(p)
		if err != nil || n < 1 || n > 65535 {
			f.Add("HALFMARK_SMTP_PORT", "must be a TCP port number between 1 and 65535 (got %q)", p)
		}
		c.SMTPPort = n
	}
	switch c.TLSPolicy {
	case "", TLSMandatory, TLSOpportunistic, TLSNone:
	default:
		f.Add("HALFMARK_SMTP_TLS", "must be %q (the default), %q or %q (got %q)", TLSMandatory, TLSOpportunistic, TLSNone, c.TLSPolicy)
	}
	if c.SMTPHost != "" {
		if strings.ContainsAny(c.SMTPHost, " /:") {
			f.Add("HALFMARK_SMTP_HOST", "must be a host name or address without scheme or port (got %q); put the port in HALFMARK_SMTP_PORT", c.SMTPHost)
		}
		if c.From == "" {
			f.Add("HALFMARK_SMTP_FROM", "is required when HALFMARK_SMTP_HOST is set: give the sender address, e.g. halfmark@hospital.example")
		}
	}
	if c.From != "" {
		if _, err := mail.ParseAddress(c.From); err != nil {
			f.Add("HALFMARK_SMTP_FROM", "is not an e-mail address (got %q): %v", c.From, err)
		}
	}
	if c.SMTPPassword != "" && c.SMTPUser == "" {
		f.Add("HALFMARK_SMTP_USER", "is required when HALFMARK_SMTP_PASSWORD is set")
	}
	for lvl := halfmark.LevelInspect; lvl <= halfmark.LevelImmediate; lvl++ {
		name := "HALFMARK_NOTIFY_LEVEL" + strconv.Itoa(int(lvl))
		addrs, err := parseAddressList(get(name))
		if err != nil {
			f.Add(name, "%v; give comma-separated addresses like a@x.example,b@x.example", err)
			continue
		}
		if len(addrs) > 0 {
			c.Recipients[lvl] = addrs
		}
	}
	if c.WebhookURL != "" {
		if err := checkHTTPURL(c.WebhookURL); err != nil {
			f.Add("HALFMARK_WEBHOOK_URL", "%v", err)
		}
		if c.WebhookSecret == "" {
			f.Add("HALFMARK_WEBHOOK_SECRET", "is required when HALFMARK_WEBHOOK_URL is set: receivers verify the X-Halfmark-Signature header with it")
		}
	}
	if c.DashboardURL != "" {
		if err := checkHTTPURL(c.DashboardURL); err != nil {
			f.Add("HALFMARK_DASHBOARD_URL", "%v", err)
		}
	}
	if err := f.Err("the notification settings are not valid"); err != nil {
		return Config{}, err
	}
	return c, nil
}

// parseAddressList splits a comma-separated list of bare addresses.
func parseAddressList(s string) ([]string, error) {
	if s == "" {
		return nil, nil
	}
	var out []string
	for _, part := range strings.Split(s, ",") {
		part = strings.TrimSpace(part)
		if part == "" {
			continue
		}
		a, err := mail.ParseAddress(part)
		if err != nil {
			return nil, fmt.Errorf("%q is not an e-mail address", part)
		}
		out = append(out, a.Address)
	}
	return out, nil
}

// checkHTTPURL accepts an absolute http(s) URL with a host. The URL itself
// is not echoed back: it may carry a token.
func checkHTTPURL(s string) error {
	u, err := url.Parse(s)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		return fmt.Errorf("must be an absolute http:// or https:// URL with a host")
	}
	return nil
}

// redactedURL keeps only the scheme and host of a URL, so that logs and
// stored errors never carry credentials or tokens from its path or query.
func redactedURL(s string) string {
	if s == "" {
		return ""
	}
	u, err := url.Parse(s)
	if err != nil || u.Host == "" {
		return "(webhook URL)"
	}
	return u.Scheme + "://" + u.Host
}

const redacted = "[redacted]"

// String describes the configuration without its secrets.
func (c Config) String() string {
	pw, sec := "", ""
	if c.SMTPPassword != "" {
		pw = redacted
	}
	if c.WebhookSecret != "" {
		sec = redacted
	}
	return fmt.Sprintf("notify.Config{SMTP: %s:%d user=%q password=%s from=%q tls=%s; webhook: %s secret=%s; recipients: L1 %d, L2 %d, L3 %d; dashboard: %q}",
		c.SMTPHost, c.SMTPPort, c.SMTPUser, pw, c.From, c.TLSPolicy,
		redactedURL(c.WebhookURL), sec,
		len(c.Recipients[halfmark.LevelInspect]), len(c.Recipients[halfmark.LevelScheduled]), len(c.Recipients[halfmark.LevelImmediate]),
		c.DashboardURL)
}

// GoString is String, so %#v does not print the secrets either.
func (c Config) GoString() string { return c.String() }

// LogValue makes slog print the configuration without its secrets.
func (c Config) LogValue() slog.Value {
	return slog.GroupValue(
		slog.String("smtp_host", c.SMTPHost),
		slog.Int("smtp_port", c.SMTPPort),
		slog.String("smtp_user", c.SMTPUser),
		slog.Bool("smtp_password_set", c.SMTPPassword != ""),
		slog.String("from", c.From),
		slog.String("tls", c.TLSPolicy),
		slog.String("webhook", redactedURL(c.WebhookURL)),
		slog.Bool("webhook_secret_set", c.WebhookSecret != ""),
		slog.String("dashboard", c.DashboardURL),
	)
}
