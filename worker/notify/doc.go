// Package notify is Halfmark's notification outbox: Level 2 and Level 3
// alerts are e-mailed and posted to a webhook at once, Level 1 alerts are
// collected in a daily digest.
//
// A notification is first written to the outbox table (migration
// 00003_outbox.sql) inside the transaction that changes the alert
// (EnqueueAlert) or by the daily job (EnqueueDigest); its dedupe key makes a
// repeat a no-op. A Deliverer then sends the due rows (RunOnce), retrying
// failures with capped exponential backoff. E-mail goes over SMTP with
// STARTTLS required unless configured otherwise; a webhook is a JSON POST
// signed with HMAC-SHA256.
package notify
