package api

import (
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net/http"
	"strings"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/analysis/rawdata"
)

// checkFromRaw stores a check whose edges Halfmark computes from the raw
// file: multipart/form-data with parts "check" (the check as JSON, without
// edges), "kind" (profile, image or picket), "options" (analysis options as
// JSON, optional) and "file". The raw file, the options, the full analysis
// and the analysis version are kept with the check.
func (h *handlers) checkFromRaw(c echo.Context) error {
	r := c.Request()
	r.Body = http.MaxBytesReader(c.Response(), r.Body, MaxUpload+1<<20)
	if err := r.ParseMultipartForm(8 << 20); err != nil {
		return badRequest(http.StatusBadRequest, "send multipart/form-data with parts check (JSON), kind, options (JSON) and file: "+err.Error())
	}
	var req checkRequest
	dec := json.NewDecoder(strings.NewReader(r.FormValue("check")))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&req); err != nil {
		return jsonProblem(err, []byte(r.FormValue("check")))
	}
	if err := dec.Decode(&struct{}{}); err != io.EOF {
		return badRequest(http.StatusBadRequest, "the check part holds more than one JSON value; send exactly one object")
	}
	if len(req.Edges) > 0 {
		return halfmark.Invalid("the check is not valid; nothing was stored",
			halfmark.FieldError{Field: "check.edges", Message: "leave edges out: they are computed from the file"})
	}
	kind := halfmark.RawKind(r.FormValue("kind"))
	fh, err := c.FormFile("file")
	if err != nil {
		return halfmark.Invalid("the check is not valid; nothing was stored", halfmark.FieldError{Field: "file", Message: "upload the raw file as the part named file"})
	}
	if fh.Size > MaxUpload {
		return badRequest(http.StatusRequestEntityTooLarge, "the file is over the 64 MiB limit")
	}
	fr, err := fh.Open()
	if err != nil {
		return err
	}
	data, err := io.ReadAll(fr)
	fr.Close()
	if err != nil {
		return err
	}
	opts := json.RawMessage(r.FormValue("options"))
	analysis, edges, err := rawdata.Analyze(kind, data, opts)
	if err != nil {
		return analysisErr(err)
	}
	var f halfmark.Fields
	chk := req.toCheck("check.", &f)
	if err := f.Err("the check is not valid; nothing was stored"); err != nil {
		return err
	}
	chk.Edges = edges
	chk.AnalysisVersion = rawdata.Version
	raw := halfmark.RawData{Kind: kind, Filename: fh.Filename, Content: data, Options: opts, Analysis: analysis, AnalysisVersion: rawdata.Version}
	stored, created, err := h.s.Checks.RecordCheckWithRaw(c.Request().Context(), actor(c), &chk, &raw)
	if err != nil {
		return err
	}
	status := http.StatusOK
	if created {
		status = http.StatusCreated
		h.countIngest(1, len(stored.Edges))
	}
	return c.JSON(status, struct {
		halfmark.StoredCheck
		Analysis json.RawMessage `json:"analysis"`
	}{stored, analysis})
}

// recompute re-runs the current analysis on a check's raw data. When the
// edges change, a new check that supersedes the old one is stored with the
// same raw data and the new analysis version; otherwise nothing is written.
func (h *handlers) recompute(c echo.Context) error {
	ctx := c.Request().Context()
	id, err := pathCheckID(c)
	if err != nil {
		return err
	}
	old, err := h.s.Checks.Check(ctx, id)
	if err != nil {
		return err
	}
	if old.SupersededBy != "" {
		return halfmark.Errorf(halfmark.EConflict, "check %s has been corrected by %s; recompute the newest version", old.ID, old.SupersededBy)
	}
	list, err := h.s.Raw.RawForCheck(ctx, old.ID)
	if err != nil {
		return err
	}
	if len(list) == 0 {
		return halfmark.Errorf(halfmark.EConflict, "check %s carries no raw data to recompute from", old.ID)
	}
	raw, err := h.s.Raw.Raw(ctx, list[0].ID)
	if err != nil {
		return err
	}
	analysis, edges, err := rawdata.Analyze(raw.Kind, raw.Content, raw.Options)
	if err != nil {
		return analysisErr(err)
	}
	if sameEdges(old.Check.Edges, edges) {
		return c.JSON(http.StatusOK, map[string]any{"changed": false, "check_id": old.ID, "analysis_version": rawdata.Version,
			"stored_analysis_version": old.AnalysisVersion})
	}
	next := old.Check
	next.ID, next.SupersededBy, next.Supersedes = "", "", old.ID
	next.Edges = edges
	next.AnalysisVersion = rawdata.Version
	next.Note = strings.TrimSpace(fmt.Sprintf("%s [recomputed from raw data with analysis %s]", old.Note, rawdata.Version))
	nr := halfmark.RawData{Kind: raw.Kind, Filename: raw.Filename, Content: raw.Content, Options: raw.Options, Analysis: analysis, AnalysisVersion: rawdata.Version}
	stored, _, err := h.s.Checks.RecordCheckWithRaw(ctx, actor(c), &next, &nr)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, map[string]any{"changed": true, "check": stored, "supersedes": old.ID})
}

// sameEdges compares stored and recomputed edges to 1 µm.
func sameEdges(a, b []halfmark.EdgeResult) bool {
	if len(a) != len(b) {
		return false
	}
	m := map[string]halfmark.EdgeResult{}
	for _, e := range a {
		m[e.Edge] = e
	}
	for _, e := range b {
		o, ok := m[e.Edge]
		if !ok || math.Abs(o.PositionMM-e.PositionMM) > 1e-3 {
			return false
		}
		if (o.PenumbraMM == nil) != (e.PenumbraMM == nil) || (o.PenumbraMM != nil && math.Abs(*o.PenumbraMM-*e.PenumbraMM) > 1e-3) {
			return false
		}
	}
	return true
}

func (h *handlers) listRaw(c echo.Context) error {
	id, err := pathCheckID(c)
	if err != nil {
		return err
	}
	if _, err := h.s.Checks.Check(c.Request().Context(), id); err != nil {
		return err // an unknown check is 404, not an empty list
	}
	list, err := h.s.Raw.RawForCheck(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"raw": nonNil(list)})
}

// getRaw sends a raw file back exactly as it was stored.
func (h *handlers) getRaw(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	r, err := h.s.Raw.Raw(c.Request().Context(), id)
	if err != nil {
		return err
	}
	ct := "application/octet-stream"
	switch r.Kind {
	case halfmark.RawProfile:
		ct = "text/csv; charset=utf-8"
	case halfmark.RawImage, halfmark.RawPicket:
		ct = "application/dicom"
	}
	c.Response().Header().Set("Content-Disposition", fmt.Sprintf("attachment; filename=%q", r.Filename))
	return c.Blob(http.StatusOK, ct, r.Content)
}
