package api

import (
	"net/http"

	"github.com/labstack/echo/v4"

	"halfmark"
)

type machineRequest struct {
	Name         string   `json:"name"`
	SADcm        *float64 `json:"sad_cm"`
	Model        string   `json:"model"`
	Serial       string   `json:"serial"`
	MLCLeafPairs int      `json:"mlc_leaf_pairs"`
	MLCLayout    string   `json:"mlc_layout"`
	Clinical     *bool    `json:"clinical"`

	Collimators *halfmark.Collimators `json:"collimators"`
}

func (h *handlers) createMachine(c echo.Context) error {
	var req machineRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	m := halfmark.Machine{Name: req.Name, Model: req.Model, Serial: req.Serial, MLCLeafPairs: req.MLCLeafPairs,
		MLCLayout: req.MLCLayout, SADcm: 100, Clinical: true, Collimators: req.Collimators}
	if req.SADcm != nil {
		m.SADcm = *req.SADcm
		if m.SADcm == 0 {
			m.SADcm = -1 // an explicit 0 is an error, not "use the default"
		}
	}
	if req.Clinical != nil {
		m.Clinical = *req.Clinical
	}
	if err := h.s.Machines.CreateMachine(c.Request().Context(), actor(c), &m); err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, m)
}

// machinePatch is the body of PATCH /machines/{id}: the collimator
// geometry is the one field that may change.
type machinePatch struct {
	Collimators *halfmark.Collimators `json:"collimators"`
}

func (h *handlers) patchMachine(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	var req machinePatch
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	if req.Collimators == nil {
		return halfmark.Invalid("nothing to change", halfmark.FieldError{Field: "collimators",
			Message: "is required: {\"upper_jaws\": \"X\" or \"Y\", \"upper_scd_cm\", \"lower_scd_cm\", \"mlc_scd_cm\"}"})
	}
	m, err := h.s.Machines.SetCollimators(c.Request().Context(), actor(c), id, *req.Collimators)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, m)
}

func (h *handlers) listMachines(c echo.Context) error {
	ms, err := h.s.Machines.Machines(c.Request().Context())
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"machines": nonNil(ms)})
}

func (h *handlers) getMachine(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	m, err := h.s.Machines.Machine(c.Request().Context(), id)
	if err != nil {
		return err
	}
	bs, err := h.s.Machines.Beams(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, struct {
		halfmark.Machine
		Beams []halfmark.Beam `json:"beams"`
	}{m, nonNil(bs)})
}

type beamRequest struct {
	EnergyMV float64 `json:"energy_mv"`
	FFF      bool    `json:"fff"`
}

func (h *handlers) createBeam(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	var req beamRequest
	if err := decodeJSON(c, &req); err != nil {
		return err
	}
	b := halfmark.Beam{MachineID: id, EnergyMV: req.EnergyMV, FFF: req.FFF}
	if err := h.s.Machines.CreateBeam(c.Request().Context(), actor(c), &b); err != nil {
		return err
	}
	return c.JSON(http.StatusCreated, b)
}

func (h *handlers) listBeams(c echo.Context) error {
	id, err := pathID(c, "id")
	if err != nil {
		return err
	}
	if _, err := h.s.Machines.Machine(c.Request().Context(), id); err != nil {
		return err
	}
	bs, err := h.s.Machines.Beams(c.Request().Context(), id)
	if err != nil {
		return err
	}
	return c.JSON(http.StatusOK, map[string]any{"beams": nonNil(bs)})
}

// nonNil makes an empty list encode as [] rather than null.
func nonNil[T any](s []T) []T {
	if s == nil {
		return []T{}
	}
	return s
}
