package notify

import (
	"bytes"
	"fmt"
	"log/slog"
	"slices"
	"strings"
	"testing"

	"halfmark"
)

func envOf(m map[string]string) func(string) string { return func(k string) string { return m[k] } }

func TestConfigFromEnv(t *testing.T) {
	env := map[string]string{
		"HALFMARK_SMTP_HOST":      "smtp.hospital.example",
		"HALFMARK_SMTP_PORT":      "2525",
		"HALFMARK_SMTP_USER":      "halfmark",
		"HALFMARK_SMTP_PASSWORD":  "pa55 word",
		"HALFMARK_SMTP_FROM":      "Halfmark <halfmark@hospital.example>",
		"HALFMARK_SMTP_TLS":       "Opportunistic",
		"HALFMARK_WEBHOOK_URL":    "https://chat.hospital.example/hooks/abc?token=t0k3n",
		"HALFMARK_WEBHOOK_SECRET": "whsec-123",
		"HALFMARK_NOTIFY_LEVEL1":  "digest@hospital.example",
		"HALFMARK_NOTIFY_LEVEL2":  " a@hospital.example, B <b@hospital.example> ,",
		"HALFMARK_NOTIFY_LEVEL3":  "oncall@hospital.example",
		"HALFMARK_DASHBOARD_URL":  "https://halfmark.hospital.example/",
	}
	c, err := ConfigFromEnv(envOf(env))
	if err != nil {
		t.Fatal(err)
	}
	if c.SMTPHost != "smtp.hospital.example" || c.SMTPPort != 2525 || c.SMTPUser != "halfmark" || c.SMTPPassword != "pa55 word" ||
		c.TLSPolicy != TLSOpportunistic || c.WebhookSecret != "whsec-123" || c.DashboardURL != "https://halfmark.hospital.example" {
		t.Errorf("config = %#v", c)
	}
	if got := c.Recipients[halfmark.LevelScheduled]; !slices.Equal(got, []string{"a@hospital.example", "b@hospital.example"}) {
		t.Errorf("level 2 recipients = %v", got)
	}
	if len(c.Recipients[halfmark.LevelInspect]) != 1 || len(c.Recipients[halfmark.LevelImmediate]) != 1 {
		t.Errorf("recipients = %v", c.Recipients)
	}

	// Nothing set: a valid configuration that sends nothing, TLS mandatory by default.
	c, err = ConfigFromEnv(envOf(nil))
	if err != nil {
		t.Fatal(err)
	}
	if d := c.withDefaults(); d.TLSPolicy != TLSMandatory || d.SMTPPort != DefaultSMTPPort || c.emailEnabled() || c.WebhookURL != "" {
		t.Errorf("empty environment gave %v", d)
	}
}

func TestConfigFromEnvNamesEachBadValue(t *testing.T) {
	cases := []struct {
		env  map[string]string
		want string // the variable the error must name
	}{
		{map[string]string{"HALFMARK_SMTP_PORT": "smtp"}, "HALFMARK_SMTP_PORT"},
		{map[string]string{"HALFMARK_SMTP_PORT": "70000"}, "HALFMARK_SMTP_PORT"},
		{map[string]string{"HALFMARK_SMTP_TLS": "starttls"}, "HALFMARK_SMTP_TLS"},
		{map[string]string{"HALFMARK_SMTP_HOST": "smtp.x.example"}, "HALFMARK_SMTP_FROM"},
		{map[string]string{"HALFMARK_SMTP_HOST": "smtp.x.example:587", "HALFMARK_SMTP_FROM": "h@x.example"}, "HALFMARK_SMTP_HOST"},
		{map[string]string{"HALFMARK_SMTP_FROM": "not an address"}, "HALFMARK_SMTP_FROM"},
		{map[string]string{"HALFMARK_SMTP_PASSWORD": "secret-pw"}, "HALFMARK_SMTP_USER"},
		{map[string]string{"HALFMARK_NOTIFY_LEVEL2": "a@x.example;b@x.example"}, "HALFMARK_NOTIFY_LEVEL2"},
		{map[string]string{"HALFMARK_WEBHOOK_URL": "ftp://x.example/h", "HALFMARK_WEBHOOK_SECRET": "s"}, "HALFMARK_WEBHOOK_URL"},
		{map[string]string{"HALFMARK_WEBHOOK_URL": "https://x.example/h"}, "HALFMARK_WEBHOOK_SECRET"},
		{map[string]string{"HALFMARK_DASHBOARD_URL": "halfmark.local"}, "HALFMARK_DASHBOARD_URL"},
	}
	for _, c := range cases {
		_, err := ConfigFromEnv(envOf(c.env))
		if err == nil {
			t.Errorf("%v: no error", c.env)
			continue
		}
		if halfmark.ErrorCodeOf(err) != halfmark.EInvalid || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%v: error %q does not name %s", c.env, err, c.want)
		}
		if strings.Contains(err.Error(), "secret-pw") {
			t.Errorf("%v: error carries the password: %v", c.env, err)
		}
	}
}

func TestConfigNeverPrintsSecrets(t *testing.T) {
	c := Config{SMTPHost: "smtp.x.example", SMTPUser: "u", SMTPPassword: "hunter2-password", From: "h@x.example",
		WebhookURL: "https://hooks.x.example/p?token=url-token-42", WebhookSecret: "whsec-secret-99"}
	var logBuf bytes.Buffer
	slog.New(slog.NewJSONHandler(&logBuf, nil)).Info("config", "cfg", c)
	slog.New(slog.NewTextHandler(&logBuf, nil)).Info("config", "cfg", c)
	out := fmt.Sprintf("%v %+v %#v %s", c, c, c, c) + logBuf.String()
	for _, secret := range []string{"hunter2-password", "whsec-secret-99", "url-token-42"} {
		if strings.Contains(out, secret) {
			t.Errorf("%q printed:\n%s", secret, out)
		}
	}
	if !strings.Contains(out, "smtp.x.example") || !strings.Contains(out, "https://hooks.x.example") {
		t.Errorf("the non-secret parts are missing:\n%s", out)
	}
}
