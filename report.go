package halfmark

import (
	"context"
	"fmt"
	"time"
)

// ReportDraft is a machine's monthly report as rendered now: the PDF bytes
// and what makes signing it need an explicit reason.
type ReportDraft struct {
	MachineID int64
	Month     string // "2026-11"
	PDF       []byte
	// Blockers name each missing required check and each Level 2 or 3
	// finding active at the end of the month; signing a draft with
	// blockers needs a reason.
	Blockers []string
}

// SignedReport is the exact PDF a physicist signed, kept byte for byte.
type SignedReport struct {
	MachineID int64     `json:"machine_id"`
	Month     string    `json:"month"`
	SHA256    string    `json:"sha256"` // hex of the PDF bytes
	SignedBy  string    `json:"signed_by"`
	SignedAt  time.Time `json:"signed_at"`
	Reason    string    `json:"reason,omitempty"`
	Blockers  []string  `json:"blockers,omitempty"`
	PDF       []byte    `json:"-"`
}

// ReportRenderer renders monthly reports from what the drift engine stored.
type ReportRenderer interface {
	// RenderReport renders the draft of a machine's month ("2026-11");
	// ENotFound for an unknown machine, EInvalid for a bad month.
	RenderReport(ctx context.Context, machineID int64, month string) (ReportDraft, error)
}

// ReportService keeps signed reports in an append-only store.
type ReportService interface {
	// SignMonthlyReport stores the draft's exact bytes with their SHA-256, the
	// signer and the reason, and writes the audit row, in one transaction.
	// EForbidden below the physicist role; EInvalid (field "reason") when
	// the draft has blockers and the reason is empty; EConflict when the
	// month is already signed.
	SignMonthlyReport(ctx context.Context, a Actor, d ReportDraft, reason string) (SignedReport, error)
	// SignedReport returns the signed report with its bytes; ENotFound
	// until the month is signed.
	SignedReport(ctx context.Context, machineID int64, month string) (SignedReport, error)
}

// ParseReportMonth checks a report month written "2026-11" and returns its
// bounds [from, to) in loc.
func ParseReportMonth(month string, loc *time.Location) (from, to time.Time, err error) {
	t, err := time.ParseInLocation("2006-01", month, loc)
	if err != nil || t.Format("2006-01") != month {
		return time.Time{}, time.Time{}, Invalid("the month is not valid",
			FieldError{Field: "month", Message: fmt.Sprintf("%q is not a month like 2026-11", month)})
	}
	return t, t.AddDate(0, 1, 0), nil
}
