package notify

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"time"

	gomail "github.com/wneessen/go-mail"

	"halfmark"
)

// goMailTLSPolicy maps Config.TLSPolicy onto go-mail's policy; anything
// unknown is refused rather than sent in clear text.
func goMailTLSPolicy(p string) (gomail.TLSPolicy, error) {
	switch p {
	case "", TLSMandatory:
		return gomail.TLSMandatory, nil
	case TLSOpportunistic:
		return gomail.TLSOpportunistic, nil
	case TLSNone:
		return gomail.NoTLS, nil
	}
	return 0, fmt.Errorf("SMTP TLS policy %q is unknown: use %q, %q or %q", p, TLSMandatory, TLSOpportunistic, TLSNone)
}

// smtpClient builds a go-mail client from the configuration. The password
// goes only into the client; go-mail does not log authentication data
// unless asked to (WithLogAuthData, never used here).
func (d *Deliverer) smtpClient() (*gomail.Client, error) {
	c := d.cfg
	if c.SMTPHost == "" {
		return nil, errors.New("no SMTP host is configured (HALFMARK_SMTP_HOST)")
	}
	policy, err := goMailTLSPolicy(c.TLSPolicy)
	if err != nil {
		return nil, err
	}
	opts := []gomail.Option{
		gomail.WithTLSPolicy(policy),
		gomail.WithPort(c.SMTPPort),
		gomail.WithTimeout(SMTPTimeout),
	}
	if c.TLSConfig != nil {
		tc := c.TLSConfig.Clone()
		if tc.ServerName == "" {
			tc.ServerName = c.SMTPHost
		}
		if tc.MinVersion == 0 {
			tc.MinVersion = tls.VersionTLS12
		}
		opts = append(opts, gomail.WithTLSConfig(tc))
	}
	if c.SMTPUser != "" {
		// Auto-discovery picks the strongest mechanism the server offers and
		// refuses PLAIN and LOGIN on an unencrypted connection.
		opts = append(opts, gomail.WithSMTPAuth(gomail.SMTPAuthAutoDiscover),
			gomail.WithUsername(c.SMTPUser), gomail.WithPassword(c.SMTPPassword))
	}
	cl, err := gomail.NewClient(c.SMTPHost, opts...)
	if err != nil {
		return nil, fmt.Errorf("SMTP client for %s:%d: %w", c.SMTPHost, c.SMTPPort, err)
	}
	return cl, nil
}

// sendEmail sends one outbox e-mail. The Message-ID is derived from the
// dedupe key and the X-Halfmark-Delivery header is the key itself, so a
// copy sent again (delivery is at-least-once) carries the same identity
// and the receiving side can drop it.
func (d *Deliverer) sendEmail(ctx context.Context, r halfmark.OutboxRow, now time.Time) error {
	if d.cfg.From == "" {
		return errors.New("no sender address is configured (HALFMARK_SMTP_FROM)")
	}
	m := gomail.NewMsg()
	if err := m.From(d.cfg.From); err != nil {
		return fmt.Errorf("sender address %q: %w", d.cfg.From, err)
	}
	if err := m.To(r.Recipients...); err != nil {
		return fmt.Errorf("recipients %v: %w", r.Recipients, err)
	}
	m.Subject(r.Subject)
	m.SetBodyString(gomail.TypeTextPlain, r.Body)
	m.SetMessageIDWithValue(messageID(r.DedupeKey, d.cfg))
	m.SetDateWithValue(now)
	m.SetGenHeader("Auto-Submitted", "auto-generated") // RFC 3834 §5: no auto-replies
	m.SetGenHeader(HeaderDelivery, r.DedupeKey)
	cl, err := d.smtpClient()
	if err != nil {
		return &channelDownError{channel: ChannelEmail, err: err}
	}
	if err := cl.DialAndSendWithContext(ctx, m); err != nil {
		err = fmt.Errorf("SMTP %s:%d: %w", d.cfg.SMTPHost, d.cfg.SMTPPort, err)
		// A *SendError comes from a command on an established session
		// (MAIL, RCPT, DATA): this message failed, not the server. Anything
		// else is the connection, STARTTLS or authentication.
		var se *gomail.SendError
		if errors.As(err, &se) && se.Reason != gomail.ErrConnCheck {
			return err
		}
		return &channelDownError{channel: ChannelEmail, err: err}
	}
	return nil
}
