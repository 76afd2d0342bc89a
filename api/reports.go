package api

import (
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// reportRequest is the optional body of POST .../reports/{yyyy-mm}/sign.
type reportRequest struct {
	Reason string `json:"reason"`
}

// signedReportAnswer is the answer to a signature.
type signedReportAnswer struct {
	SHA256   string    `json:"sha256"`
	SignedBy string    `json:"signed_by"`
	SignedAt time.Time `json:"signed_at"`
}

func (h *handlers) reportMonth(c echo.Context) (int64, string, error) {
	id, err := pathID(c, "id")
	if err != nil {
		return 0, "", err
	}
	month := c.Param("month")
	if _, _, err := halfmark.ParseReportMonth(month, time.Local); err != nil {
		return 0, "", err
	}
	return id, month, nil
}

func reportsUnavailable() error {
	return halfmark.Errorf(halfmark.EUnavailable, "monthly reports are not available on this server")
}

// getReportDraft answers the month's report rendered now (unsigned).
func (h *handlers) getReportDraft(c echo.Context) error {
	id, month, err := h.reportMonth(c)
	if err != nil {
		return err
	}
	if h.s.ReportRenderer == nil {
		return reportsUnavailable()
	}
	d, err := h.s.ReportRenderer.RenderReport(c.Request().Context(), id, month)
	if err != nil {
		return err
	}
	c.Response().Header().Set("X-Report-Status", "draft")
	return c.Blob(http.StatusOK, "application/pdf", d.PDF)
}

// getSignedReport answers the signed bytes exactly as stored; 404 until
// the month is signed.
func (h *handlers) getSignedReport(c echo.Context) error {
	id, month, err := h.reportMonth(c)
	if err != nil {
		return err
	}
	if h.s.Reports == nil {
		return reportsUnavailable()
	}
	r, err := h.s.Reports.SignedReport(c.Request().Context(), id, month)
	if err != nil {
		return err
	}
	hd := c.Response().Header()
	hd.Set("X-Report-SHA256", r.SHA256)
	hd.Set("X-Report-Signed-By", r.SignedBy)
	hd.Set("X-Report-Signed-At", r.SignedAt.UTC().Format(time.RFC3339))
	return c.Blob(http.StatusOK, "application/pdf", r.PDF)
}

// signReport renders the month now and stores exactly those bytes, signed.
// With missing required checks or an active Level 2/3 finding the body
// must give a reason.
func (h *handlers) signReport(c echo.Context) error {
	id, month, err := h.reportMonth(c)
	if err != nil {
		return err
	}
	var req reportRequest
	if c.Request().ContentLength != 0 {
		if err := decodeJSON(c, &req); err != nil {
			return err
		}
	}
	if h.s.Reports == nil || h.s.ReportRenderer == nil {
		return reportsUnavailable()
	}
	ctx := c.Request().Context()
	d, err := h.s.ReportRenderer.RenderReport(ctx, id, month)
	if err != nil {
		return err
	}
	r, err := h.s.Reports.SignMonthlyReport(ctx, actor(c), d, strings.TrimSpace(req.Reason))
	if err != nil {
		return err
	}
	c.Response().Header().Set(echo.HeaderLocation, "/api/v1/machines/"+c.Param("id")+"/reports/"+month+"/signed")
	return c.JSON(http.StatusCreated, signedReportAnswer{SHA256: r.SHA256, SignedBy: r.SignedBy, SignedAt: r.SignedAt})
}
