package api

import (
	"math"
	"net/http"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/analysis/penumbra"
)

// radiologicalJSON is the fitted radiological part R(d).
type radiologicalJSON struct {
	Form         string    `json:"form"`         // "r0 + r1·d" or "r0"
	Coefficients []float64 `json:"coefficients"` // r0 in mm[, r1 in mm/cm]
	SE           []float64 `json:"se"`           // their standard errors
	Units        []string  `json:"units"`
}

// penumbraModelJSON is the answer of GET /beams/{id}/penumbra-model.
type penumbraModelJSON struct {
	BeamID          int64                `json:"beam_id"`
	MachineID       int64                `json:"machine_id"`
	Method          halfmark.Method      `json:"method"`
	SourceSigmaMM   float64              `json:"source_sigma_mm"`
	SourceSigmaSEMM float64              `json:"source_sigma_se_mm"`
	Radiological    radiologicalJSON     `json:"radiological"`
	PointsUsed      int                  `json:"points_used"`
	RMSResidualMM   float64              `json:"rms_residual_mm"`
	PeriodStart     *time.Time           `json:"period_start"` // null: no baseline set, the period starts with the first point
	Collimators     halfmark.Collimators `json:"collimators"`
	Residuals       []penumbra.Residual  `json:"residuals"`
	Model           string               `json:"model"`
}

// penumbraModelFor reads the method and until query parameters and fits.
func (h *handlers) penumbraModelFor(c echo.Context) (penumbra.Model, halfmark.PenumbraSet, error) {
	if h.s.Penumbra == nil {
		return penumbra.Model{}, halfmark.PenumbraSet{}, halfmark.Errorf(halfmark.EUnavailable, "the penumbra model is not served here")
	}
	id, err := pathID(c, "id")
	if err != nil {
		return penumbra.Model{}, halfmark.PenumbraSet{}, err
	}
	var until time.Time
	if u := strings.TrimSpace(c.QueryParam("until")); u != "" {
		if until, err = time.Parse(time.RFC3339, u); err != nil {
			return penumbra.Model{}, halfmark.PenumbraSet{}, halfmark.Invalid("the query is not valid",
				halfmark.FieldError{Field: "until", Message: "must be an RFC 3339 time such as 2026-03-02T00:00:00Z (got \"" + u + "\")"})
		}
	}
	return penumbra.LoadModel(c.Request().Context(), h.s.Penumbra, id, halfmark.Method(strings.TrimSpace(c.QueryParam("method"))), until)
}

// getPenumbraModel serves GET /api/v1/beams/{id}/penumbra-model.
func (h *handlers) getPenumbraModel(c echo.Context) error {
	m, set, err := h.penumbraModelFor(c)
	if err != nil {
		return err
	}
	out := penumbraModelJSON{BeamID: set.Beam.ID, MachineID: set.Machine.ID, Method: halfmark.Method(m.Method),
		SourceSigmaMM: m.SourceSigmaMM, SourceSigmaSEMM: m.SourceSigmaSEMM,
		Radiological: radiologicalJSON{Form: m.Form, Coefficients: m.R, SE: m.RSE, Units: []string{"mm", "mm/cm"}[:len(m.R)]},
		PointsUsed:   m.PointsUsed, RMSResidualMM: m.RMSResidualMM, Collimators: *set.Machine.Collimators,
		Residuals: nonNil(m.Residuals),
		Model:     "P = sqrt((1.6832·σ_s·M)² + R(d)²), M = (SSD + d − SCD)/SCD; an approximation (common practice)"}
	if !m.PeriodStart.IsZero() {
		out.PeriodStart = &m.PeriodStart
	}
	return c.JSON(http.StatusOK, out)
}

type predictRequest struct {
	SSDcm      *float64 `json:"ssd_cm"`
	DepthCm    *float64 `json:"depth_cm"`
	Collimator string   `json:"collimator"`
}

// predictPenumbra serves POST /api/v1/beams/{id}/penumbra-model/predict.
func (h *handlers) predictPenumbra(c echo.Context) error {
	var req predictRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	var f halfmark.Fields
	if req.SSDcm == nil {
		f.Add("ssd_cm", "is required: the source-to-surface distance in cm")
	} else if v := *req.SSDcm; math.IsNaN(v) || v < halfmark.MinSSDcm || v > halfmark.MaxSSDcm {
		f.Add("ssd_cm", "must be between %v and %v cm (got %v)", halfmark.MinSSDcm, halfmark.MaxSSDcm, v)
	}
	if req.DepthCm == nil {
		f.Add("depth_cm", "is required: the depth of the plane in cm (0 at the surface)")
	} else if v := *req.DepthCm; math.IsNaN(v) || v < 0 || v > halfmark.MaxDepthCm {
		f.Add("depth_cm", "must be between 0 and %v cm (got %v)", halfmark.MaxDepthCm, v)
	}
	coll := penumbra.Collimator(strings.ToLower(strings.TrimSpace(req.Collimator)))
	if !coll.Valid() {
		f.Add("collimator", "must be upper, lower or mlc (got %q)", req.Collimator)
	}
	if err := f.Err("the prediction request is not valid"); err != nil {
		return err
	}
	m, set, err := h.penumbraModelFor(c)
	if err != nil {
		return err
	}
	p, err := m.Predict(*req.SSDcm, *req.DepthCm, coll)
	if err != nil {
		field := "collimator"
		if strings.Contains(err.Error(), "ssd_cm") {
			field = "ssd_cm"
		} else if strings.Contains(err.Error(), "depth_cm") {
			field = "depth_cm"
		}
		return halfmark.Invalid("the prediction request is not valid", halfmark.FieldError{Field: field, Message: err.Error()})
	}
	return c.JSON(http.StatusOK, map[string]any{"penumbra_mm": p.PenumbraMM, "interval_mm": p.IntervalMM,
		"beam_id": set.Beam.ID, "method": m.Method, "collimator": coll, "ssd_cm": *req.SSDcm, "depth_cm": *req.DepthCm})
}
