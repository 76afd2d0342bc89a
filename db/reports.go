package db

import (
	"context"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// maxReasonLen bounds a signing reason (characters).
const maxReasonLen = 4000

// SignMonthlyReport implements halfmark.ReportService: the draft's bytes, their
// SHA-256, the signer and the reason go into signed_reports (append-only)
// and the audit log in one transaction.
func (d *DB) SignMonthlyReport(ctx context.Context, a halfmark.Actor, r halfmark.ReportDraft, reason string) (halfmark.SignedReport, error) {
	if !a.Role.Allows(halfmark.RolePhysicist) {
		return halfmark.SignedReport{}, halfmark.Errorf(halfmark.EForbidden, "signing a report needs the physicist role; you have the %s role", a.Role)
	}
	if _, _, err := halfmark.ParseReportMonth(r.Month, time.UTC); err != nil {
		return halfmark.SignedReport{}, err
	}
	// The one rule for sign-offs: a month from 1990 to the current one, the
	// reason free text without control characters.
	if err := halfmark.ValidateSignOff(r.Month, reason, d.Now()); err != nil {
		return halfmark.SignedReport{}, err
	}
	reason = strings.TrimSpace(reason)
	if len(r.PDF) == 0 {
		return halfmark.SignedReport{}, halfmark.Invalid("the report is empty; render it again", halfmark.FieldError{Field: "pdf", Message: "has no bytes"})
	}
	if len([]rune(reason)) > maxReasonLen {
		return halfmark.SignedReport{}, halfmark.Invalid("the signature is not valid",
			halfmark.FieldError{Field: "reason", Message: fmt.Sprintf("is longer than %d characters", maxReasonLen)})
	}
	if len(r.Blockers) > 0 && reason == "" {
		return halfmark.SignedReport{}, halfmark.Invalid("the month has open points; signing it needs a reason",
			halfmark.FieldError{Field: "reason", Message: "is required because of: " + strings.Join(r.Blockers, "; ")})
	}
	if _, err := d.Machine(ctx, r.MachineID); err != nil {
		return halfmark.SignedReport{}, err
	}
	sum := sha256.Sum256(r.PDF)
	blockers := r.Blockers
	if blockers == nil {
		blockers = []string{}
	}
	out := halfmark.SignedReport{MachineID: r.MachineID, Month: r.Month, SHA256: hex.EncodeToString(sum[:]), SignedBy: a.Name,
		Reason: reason, Blockers: r.Blockers, PDF: r.PDF}
	var uid *int64
	if a.UserID != 0 {
		uid = &a.UserID
	}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var signedBy string
		var at time.Time
		err := tx.QueryRow(ctx, `SELECT signed_by, signed_at FROM signed_reports WHERE machine_id = $1 AND month = $2`, r.MachineID, r.Month).Scan(&signedBy, &at)
		if err == nil {
			return halfmark.Errorf(halfmark.EConflict, "the %s report of machine %d was already signed by %s at %s; the signed copy stays as it is",
				r.Month, r.MachineID, signedBy, at.UTC().Format(time.RFC3339))
		}
		if err != pgx.ErrNoRows {
			return err
		}
		if err := tx.QueryRow(ctx, `INSERT INTO signed_reports (machine_id, month, pdf, sha256, signed_by, signed_by_user, reason, blockers)
			VALUES ($1,$2,$3,$4,$5,$6,$7,$8) RETURNING signed_at`,
			r.MachineID, r.Month, r.PDF, sum[:], a.Name, uid, reason, blockers).Scan(&out.SignedAt); err != nil {
			return err
		}
		return audit(ctx, tx, a, "sign", "report", halfmark.ReportEntityID(r.MachineID, r.Month), map[string]any{
			"machine_id": r.MachineID, "month": r.Month, "sha256": out.SHA256, "bytes": len(r.PDF),
			"reason": reason, "blockers": blockers, "user_id": a.UserID})
	})
	if err != nil {
		return halfmark.SignedReport{}, mapErr(err)
	}
	return out, nil
}

// SignedReport implements halfmark.ReportService.
func (d *DB) SignedReport(ctx context.Context, machineID int64, month string) (halfmark.SignedReport, error) {
	r := halfmark.SignedReport{MachineID: machineID, Month: month}
	var sum []byte
	err := d.Pool.QueryRow(ctx, `SELECT pdf, sha256, signed_by, signed_at, reason, blockers FROM signed_reports
		WHERE machine_id = $1 AND month = $2`, machineID, month).Scan(&r.PDF, &sum, &r.SignedBy, &r.SignedAt, &r.Reason, &r.Blockers)
	if err == pgx.ErrNoRows {
		return r, halfmark.Errorf(halfmark.ENotFound, "the %s report of machine %d is not signed yet", month, machineID)
	}
	if err != nil {
		return r, mapErr(err)
	}
	r.SHA256 = hex.EncodeToString(sum)
	if len(r.Blockers) == 0 {
		r.Blockers = nil
	}
	return r, nil
}
