package notify

import (
	"bytes"
	"context"
	"crypto/hmac"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"time"

	"halfmark"
)

// Webhook headers. A receiver verifies X-Halfmark-Signature by computing
// the HMAC-SHA256 (RFC 2104, FIPS 198-1) of the raw request body with the
// shared secret, and drops a repeated X-Halfmark-Delivery it has already
// processed: delivery is at-least-once, and a copy sent again after a lost
// commit carries the same delivery key.
const (
	HeaderSignature = "X-Halfmark-Signature" // "sha256=<hex HMAC-SHA256 of the body>"
	HeaderDelivery  = "X-Halfmark-Delivery"  // the outbox dedupe key, stable across retries
	HeaderEvent     = "X-Halfmark-Event"     // "finding" or "digest"
)

// Sign returns the X-Halfmark-Signature value of body:
//
//	"sha256=" + hex(HMAC-SHA256(secret, body))
func Sign(secret string, body []byte) string {
	m := hmac.New(sha256.New, []byte(secret))
	m.Write(body)
	return "sha256=" + hex.EncodeToString(m.Sum(nil))
}

// webhookBody adds "sent_at" to the stored payload object. Keys come out
// sorted (encoding/json sorts map keys), so the body is deterministic for
// a given payload and time.
func webhookBody(payload []byte, sentAt time.Time) ([]byte, string, error) {
	var obj map[string]json.RawMessage
	if err := json.Unmarshal(payload, &obj); err != nil {
		return nil, "", fmt.Errorf("the stored webhook payload is not a JSON object: %w", err)
	}
	ts, _ := json.Marshal(sentAt.UTC().Format(time.RFC3339Nano))
	obj["sent_at"] = ts
	var event string
	_ = json.Unmarshal(obj["event"], &event)
	body, err := json.Marshal(obj)
	return body, event, err
}

func newWebhookClient() *http.Client {
	return &http.Client{
		Timeout: WebhookTimeout,
		// A redirect is a failure: following it would re-send the signed
		// body to a URL nobody configured.
		CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse },
	}
}

// postWebhook POSTs the signed body; any 2xx answer is a delivery.
func (d *Deliverer) postWebhook(ctx context.Context, r halfmark.OutboxRow, sentAt time.Time) error {
	body, event, err := webhookBody(r.Payload, sentAt)
	if err != nil {
		return err
	}
	where := redactedURL(d.cfg.WebhookURL)
	if d.cfg.WebhookURL == "" {
		return errors.New("no webhook URL is configured (HALFMARK_WEBHOOK_URL)")
	}
	ctx, cancel := context.WithTimeout(ctx, WebhookTimeout)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, d.cfg.WebhookURL, bytes.NewReader(body))
	if err != nil {
		return fmt.Errorf("webhook %s: build the request: %w", where, stripURL(err))
	}
	req.Header.Set("Content-Type", "application/json")
	req.Header.Set("User-Agent", "Halfmark-Notify/1")
	req.Header.Set(HeaderSignature, Sign(d.cfg.WebhookSecret, body))
	req.Header.Set(HeaderDelivery, r.DedupeKey)
	if event != "" {
		req.Header.Set(HeaderEvent, event)
	}
	resp, err := d.http.Do(req)
	if err != nil {
		return &channelDownError{channel: ChannelWebhook, err: fmt.Errorf("webhook %s: %w", where, stripURL(err))}
	}
	defer resp.Body.Close()
	_, _ = io.Copy(io.Discard, io.LimitReader(resp.Body, 64<<10))
	if resp.StatusCode < 200 || resp.StatusCode > 299 {
		err := fmt.Errorf("webhook %s answered %s; a 2xx status is needed", where, resp.Status)
		if resp.StatusCode >= 500 || resp.StatusCode == http.StatusTooManyRequests {
			return &channelDownError{channel: ChannelWebhook, err: err}
		}
		return err
	}
	return nil
}

// stripURL drops the full URL from a *url.Error: it may hold a token.
func stripURL(err error) error {
	var ue *url.Error
	if errors.As(err, &ue) {
		return ue.Err
	}
	return err
}
