package api

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"halfmark"
)

// routes lists every API route and the server-wide middleware in one place.
// The dashboard adds its own routes to the same server (web/routes.go);
// /metrics is served on its own listen address (MetricsHandler).
func (h *handlers) routes(e *echo.Echo) {
	// Before routing, so 404s and problems carry them too.
	e.Pre(SecurityHeaders(h.s.TrustedProxies), LimitBody)
	if h.s.Metrics != nil {
		e.Use(h.s.Metrics.middleware)
	}

	e.GET("/healthz", h.healthz)
	e.GET("/readyz", h.readyz)
	e.GET("/api/v1/openapi.yaml", h.openapi)

	v1 := e.Group("/api/v1", h.authenticate)
	therapist, physicist, admin := need(halfmark.RoleTherapist), need(halfmark.RolePhysicist), need(halfmark.RoleAdmin)

	v1.GET("/machines", h.listMachines, therapist)
	v1.POST("/machines", h.createMachine, admin)
	v1.GET("/machines/:id", h.getMachine, therapist)
	v1.GET("/machines/:id/beams", h.listBeams, therapist)
	v1.POST("/machines/:id/beams", h.createBeam, admin)
	v1.GET("/machines/:id/series", h.machineSeries, therapist)
	v1.GET("/machines/:id/reports/:month", h.getReportDraft, therapist)
	v1.GET("/machines/:id/reports/:month/signed", h.getSignedReport, therapist)
	v1.POST("/machines/:id/reports/:month/sign", h.signReport, physicist)
	v1.PATCH("/machines/:id", h.patchMachine, admin)
	v1.GET("/beams/:id/penumbra-model", h.getPenumbraModel, therapist)
	v1.POST("/beams/:id/penumbra-model/predict", h.predictPenumbra, therapist)

	v1.POST("/checks", h.createCheck, therapist)
	v1.POST("/checks/batch", h.createBatch, therapist)
	v1.GET("/checks", h.listChecks, therapist)
	v1.GET("/checks/:id", h.getCheck, therapist)
	v1.POST("/checks/raw", h.checkFromRaw, therapist, RaiseBodyLimit(MaxUpload+1<<20))
	v1.POST("/checks/:id/recompute", h.recompute, physicist)
	v1.GET("/checks/:id/raw", h.listRaw, therapist)
	v1.GET("/raw/:id", h.getRaw, therapist)

	v1.GET("/series/:id", h.getSeries, therapist)
	v1.GET("/series/:id/points", h.seriesPoints, therapist)
	v1.GET("/series/:id/baselines", h.listBaselines, therapist)
	v1.POST("/series/:id/baselines", h.setBaseline, physicist)

	upload := RaiseBodyLimit(MaxUpload + 1<<20)
	v1.POST("/analyze/profile", h.analyzeProfile, therapist, upload)
	v1.POST("/analyze/image", h.analyzeImage, therapist, upload)
	v1.POST("/analyze/picket", h.analyzePicket, therapist, upload)

	v1.GET("/tokens", h.listTokens, admin)
	v1.POST("/tokens", h.createToken, admin)
	v1.DELETE("/tokens/:id", h.revokeToken, admin)
	v1.GET("/audit", h.listAudit, physicist)

	v1.GET("/status", h.status, therapist)
	v1.GET("/alerts", h.listAlerts, therapist)
	v1.GET("/alerts/:id", h.getAlert, therapist)
	v1.POST("/alerts/:id/acknowledge", h.acknowledgeAlert, physicist)
	v1.POST("/alerts/:id/resolve", h.resolveAlert, physicist)
	v1.GET("/series/:id/chart", h.seriesChart, therapist)
	v1.GET("/findings", h.listFindings, therapist)
	v1.GET("/findings/:id", h.getFinding, therapist)
	v1.POST("/findings/:id/acknowledge", h.acknowledgeFinding, physicist)
	v1.POST("/findings/:id/resolve", h.resolveFinding, physicist)
	v1.GET("/machines/:id/service-events", h.listServiceEvents, therapist)
	v1.POST("/machines/:id/service-events", h.createServiceEvent, physicist)
}

// MetricsHandler serves /metrics (Prometheus text format) for the separate
// metrics listen address (`serve --metrics-addr`), with the security
// headers; nothing else is served there.
func MetricsHandler(m *Metrics) http.Handler {
	e := echo.New()
	e.HideBanner, e.HidePort = true, true
	e.Pre(SecurityHeaders(nil))
	e.GET("/metrics", echo.WrapHandler(m.handler()))
	return e
}
