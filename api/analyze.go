package api

import (
	"fmt"
	"io"
	"math"
	"mime"
	"net/http"
	"strconv"
	"strings"

	"github.com/labstack/echo/v4"

	"halfmark"
	"halfmark/analysis/rawdata"
)

// MaxUpload is the largest raw file accepted (64 MiB: a 16-bit 1280×1280
// EPID image is about 3 MiB).
const MaxUpload = 64 << 20

// readUpload returns the raw file of an analysis request: the body itself
// (text/csv, application/dicom, application/octet-stream) or the "file"
// part of a multipart/form-data body.
func readUpload(c echo.Context) ([]byte, error) {
	r := c.Request()
	mt, _, _ := mime.ParseMediaType(r.Header.Get(echo.HeaderContentType))
	if mt == "multipart/form-data" {
		r.Body = http.MaxBytesReader(c.Response(), r.Body, MaxUpload+1<<20)
		fh, err := c.FormFile("file")
		if err != nil {
			return nil, badRequest(http.StatusBadRequest, "send the raw data as the multipart part named \"file\"")
		}
		if fh.Size > MaxUpload {
			return nil, badRequest(http.StatusRequestEntityTooLarge, "the file is over the 64 MiB limit")
		}
		f, err := fh.Open()
		if err != nil {
			return nil, err
		}
		defer f.Close()
		return io.ReadAll(f)
	}
	switch mt {
	case "text/csv", "text/plain", "text/tab-separated-values", "application/dicom", "application/octet-stream":
	default:
		return nil, badRequest(http.StatusUnsupportedMediaType,
			fmt.Sprintf("send the file as text/csv (profiles), application/dicom (images) or multipart/form-data (got %q)", mt))
	}
	b, err := io.ReadAll(io.LimitReader(r.Body, MaxUpload+1))
	if err != nil {
		return nil, badRequest(http.StatusBadRequest, "the request body could not be read")
	}
	if len(b) > MaxUpload {
		return nil, badRequest(http.StatusRequestEntityTooLarge, "the file is over the 64 MiB limit")
	}
	if len(b) == 0 {
		return nil, badRequest(http.StatusBadRequest, "the request body is empty; send the file")
	}
	return b, nil
}

// queryFloat reads an optional number from the query or form.
func queryFloat(c echo.Context, name string, f *halfmark.Fields) float64 {
	s := c.QueryParam(name)
	if s == "" {
		return 0
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || v < 0 || v != v || v > 1e6 {
		f.Add(name, "must be a positive number (got %q)", s)
	}
	return v
}

// analysisErr reports a failed analysis as invalid input: the data, not the
// server, is at fault.
func analysisErr(err error) error {
	return halfmark.Invalid("the data could not be analysed: "+err.Error(), halfmark.FieldError{Field: "file", Message: err.Error()})
}

func profileParams(c echo.Context, f *halfmark.Fields) rawdata.ProfileParams {
	p := rawdata.ProfileParams{Normalise: c.QueryParam("normalise"), Interpolation: c.QueryParam("interp"), Axis: c.QueryParam("axis")}
	if s := c.QueryParam("fff"); s != "" {
		v, err := strconv.ParseBool(s)
		if err != nil {
			f.Add("fff", "must be true or false (omit it to detect)")
		}
		p.FFF = &v
	}
	if s := c.QueryParam("smooth"); s != "" {
		n, err := strconv.Atoi(s)
		if err != nil {
			f.Add("smooth", "must be a whole number of passes")
		}
		p.Smooth = n
	}
	return p
}

func imageParams(c echo.Context, f *halfmark.Fields) rawdata.ImageParams {
	p := rawdata.ImageParams{SIDmm: queryFloat(c, "sid_mm", f), SADmm: queryFloat(c, "sad_mm", f), PixelMM: queryFloat(c, "pixel_mm", f)}
	if s := c.QueryParam("collimator_deg"); s != "" {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || v < -360 || v > 360 {
			f.Add("collimator_deg", "must be the collimator angle in degrees, -360 to 360 (got %q)", s)
		} else {
			p.CollimatorDeg = &v
		}
	}
	return p
}

func (h *handlers) analyzeProfile(c echo.Context) error {
	var f halfmark.Fields
	p := profileParams(c, &f)
	if err := f.Err("the analysis options are not valid"); err != nil {
		return err
	}
	data, err := readUpload(c)
	if err != nil {
		return err
	}
	r, err := rawdata.Profile(data, p)
	if err != nil {
		return analysisErr(err)
	}
	return c.JSON(http.StatusOK, r)
}

func (h *handlers) analyzeImage(c echo.Context) error {
	var f halfmark.Fields
	p := imageParams(c, &f)
	if err := f.Err("the analysis options are not valid"); err != nil {
		return err
	}
	data, err := readUpload(c)
	if err != nil {
		return err
	}
	r, err := rawdata.Image(data, p)
	if err != nil {
		return analysisErr(err)
	}
	return c.JSON(http.StatusOK, r)
}

func (h *handlers) analyzePicket(c echo.Context) error {
	var f halfmark.Fields
	p := rawdata.PicketParams{ImageParams: imageParams(c, &f), Layout: c.QueryParam("layout"), ToleranceMM: queryFloat(c, "tolerance_mm", &f)}
	if s := c.QueryParam("pickets"); strings.TrimSpace(s) != "" {
		var err error
		if p.PicketsMM, err = rawdata.ParseList(s); err != nil {
			f.Add("pickets", "%s", err.Error())
		}
	}
	if err := f.Err("the analysis options are not valid"); err != nil {
		return err
	}
	data, err := readUpload(c)
	if err != nil {
		return err
	}
	r, err := rawdata.Picket(data, p)
	if err != nil {
		return analysisErr(err)
	}
	return c.JSON(http.StatusOK, r)
}
