// Package notify is Halfmark's notification outbox: a finding that opens
// or escalates to Level 2 or Level 3 is e-mailed and posted to a webhook at
// once, Level 1 findings are collected in a daily digest. Every link points
// to a dashboard page: the finding (/findings/<id>), the findings list
// (/findings) or the machine (/machines/<id>).
//
// A Composer writes a finding's notifications (pure, no I/O); the store
// writes them into the outbox in the transaction that changes the finding
// (halfmark.EvaluationStore.RecordMachineEvaluation), and EnqueueDigest
// writes the daily digest. Each row's dedupe key makes a repeat a no-op, so
// a finding is notified once per level and channel. A Deliverer then sends
// the due rows (RunOnce) through halfmark.OutboxStore, retrying failures
// with capped exponential backoff. E-mail goes over SMTP with STARTTLS
// required unless configured otherwise; a webhook is a JSON POST signed
// with HMAC-SHA256.
//
// Delivery is at-least-once: a send whose success is not recorded (the
// process or the database lost before the commit) is sent again. Each
// e-mail carries a stable Message-ID derived from the dedupe key, and each
// e-mail and webhook an X-Halfmark-Delivery header with the key itself, so
// receivers can drop the copy.
package notify
