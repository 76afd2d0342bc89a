package db

import (
	"strconv"
	"unicode/utf8"

	"github.com/google/uuid"
	"github.com/jackc/pgx/v5/pgtype"

	"halfmark"
)

// checkColumns are the columns checkRows fills, in order.
var checkColumns = []string{"id", "supersedes", "body_hash", "kind", "device", "method", "operator", "note", "geometry",
	"machine_id", "beam_id", "measured_at", "ssd_cm", "depth_cm", "field_x_cm", "field_y_cm", "collimator_deg",
	"gantry_deg", "edges", "analysis_version", "created_by"}

// checkRows streams the new checks to COPY in PostgreSQL's binary format.
// The edges go as JSON text written by appendEdges; ids as 16-byte UUIDs.
type checkRows struct {
	cs     []halfmark.Check
	hashes []string
	isNew  map[string]bool
	by     string
	i      int
	row    []any
	buf    []byte
}

func (r *checkRows) Next() bool {
	for r.i < len(r.cs) {
		c := &r.cs[r.i]
		i := r.i
		r.i++
		if !r.isNew[c.ID] {
			continue
		}
		id, err := uuid.Parse(c.ID)
		if err != nil {
			return false
		}
		sup := pgtype.UUID{}
		if c.Supersedes != "" {
			if u, err := uuid.Parse(c.Supersedes); err == nil {
				sup = pgtype.UUID{Bytes: u, Valid: true}
			}
		}
		r.buf = appendEdges(r.buf[:0], c.Edges)
		s := &c.Setup
		r.row = append(r.row[:0], pgtype.UUID{Bytes: id, Valid: true}, sup, r.hashes[i], string(c.Kind), c.Device, string(c.Method), c.Operator,
			c.Note, s.Geometry(), c.MachineID, c.BeamID, c.MeasuredAt, s.SSDcm, s.DepthCm, s.FieldXcm, s.FieldYcm,
			s.CollimatorDeg, s.GantryDeg, string(r.buf), c.AnalysisVersion, r.by)
		return true
	}
	return false
}

func (r *checkRows) Values() ([]any, error) { return r.row, nil }
func (r *checkRows) Err() error             { return nil }

// appendEdges writes edge results with the JSON names of
// halfmark.EdgeResult, which is how they are stored in checks.edges.
func appendEdges(b []byte, es []halfmark.EdgeResult) []byte {
	b = append(b, '[')
	for i := range es {
		e := &es[i]
		if i > 0 {
			b = append(b, ',')
		}
		b = appendField(b, "edge", e.Edge, true)
		b = appendNum(b, ",\"position_mm\":", &e.PositionMM)
		b = appendNum(b, ",\"iso_position_mm\":", &e.IsoPositionMM)
		if e.PenumbraMM != nil {
			b = appendNum(b, ",\"penumbra_mm\":", e.PenumbraMM)
		}
		if e.LightPositionMM != nil {
			b = appendNum(b, ",\"light_position_mm\":", e.LightPositionMM)
			b = appendNum(b, ",\"iso_light_position_mm\":", e.IsoLightPositionMM)
		}
		b = append(b, '}')
	}
	return append(b, ']')
}

// appendField writes "name":"value", opening the object when first.
func appendField(b []byte, name, v string, first bool) []byte {
	if first {
		b = append(b, '{')
	} else {
		b = append(b, ',')
	}
	b = append(b, '"')
	b = append(b, name...)
	b = append(b, `":`...)
	return appendString(b, v)
}

func appendNum(b []byte, key string, v *float64) []byte {
	b = append(b, key...)
	if v == nil {
		return append(b, "null"...)
	}
	return strconv.AppendFloat(b, *v, 'g', -1, 64)
}

// appendString writes s as a JSON string (RFC 8259 §7): quote, backslash
// and control characters escaped, everything else as UTF-8.
func appendString(b []byte, s string) []byte {
	const hex = "0123456789abcdef"
	b = append(b, '"')
	for i := 0; i < len(s); {
		c := s[i]
		switch {
		case c == '"' || c == '\\':
			b = append(b, '\\', c)
			i++
		case c < 0x20:
			b = append(b, '\\', 'u', '0', '0', hex[c>>4], hex[c&0xf])
			i++
		case c < utf8.RuneSelf:
			b = append(b, c)
			i++
		default:
			r, size := utf8.DecodeRuneInString(s[i:])
			if r == utf8.RuneError && size == 1 {
				b = append(b, `\ufffd`...)
			} else {
				b = append(b, s[i:i+size]...)
			}
			i += size
		}
	}
	return append(b, '"')
}
