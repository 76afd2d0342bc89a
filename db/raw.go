package db

import (
	"context"
	"path"
	"strings"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// MaxRawBytes is the largest raw file kept (64 MiB): a large EPID image
// with a few frames fits.
const MaxRawBytes = 64 << 20

// AttachRaw implements halfmark.RawService.
func (d *DB) AttachRaw(ctx context.Context, a halfmark.Actor, r *halfmark.RawData) error {
	if err := validateRaw(r, true); err != nil {
		return err
	}
	return d.tx(ctx, func(tx pgx.Tx) error {
		var n int
		if err := tx.QueryRow(ctx, `SELECT count(*) FROM checks WHERE id = $1`, r.CheckID).Scan(&n); err != nil {
			return err
		}
		if n == 0 {
			return halfmark.Invalid("the raw data is not valid", halfmark.FieldError{Field: "check_id", Message: "check " + r.CheckID + " does not exist; store the check first"})
		}
		return insertRaw(ctx, tx, a, r)
	})
}

// validateRaw checks raw data before it is stored; withCheck also requires
// its check id (absent while the check is being stored with it).
func validateRaw(r *halfmark.RawData, withCheck bool) error {
	var f halfmark.Fields
	if withCheck && !halfmark.IsUUID(r.CheckID) {
		f.Add("check_id", "must be the UUID of a stored check (got %q)", r.CheckID)
	}
	switch r.Kind {
	case halfmark.RawProfile, halfmark.RawImage, halfmark.RawPicket:
	default:
		f.Add("kind", "must be profile, image or picket (got %q)", r.Kind)
	}
	// Keep only the base name: a path in an uploaded name means nothing here.
	r.Filename = strings.TrimSpace(path.Base(strings.ReplaceAll(r.Filename, "\\", "/")))
	if r.Filename == "." || r.Filename == "/" {
		r.Filename = ""
	}
	if r.Filename == "" || len(r.Filename) > 255 || strings.ContainsAny(r.Filename, "\x00\r\n") {
		f.Add("filename", "is required: the uploaded file's name, at most 255 characters on one line")
	}
	if len(r.Content) == 0 {
		f.Add("content", "is empty; upload the measured file")
	}
	if len(r.Content) > MaxRawBytes {
		f.Add("content", "is %d bytes; at most %d are kept", len(r.Content), MaxRawBytes)
	}
	return f.Err("the raw data is not valid")
}

const rawCols = `id, check_id::text, kind, filename, options, analysis, analysis_version, created_at, created_by`

func scanRaw(r pgx.Row, content *[]byte) (halfmark.RawData, error) {
	var x halfmark.RawData
	var kind string
	var opts, an []byte
	dst := []any{&x.ID, &x.CheckID, &kind, &x.Filename, &opts, &an, &x.AnalysisVersion, &x.CreatedAt, &x.CreatedBy}
	if content != nil {
		dst = append(dst, content)
	}
	err := r.Scan(dst...)
	x.Kind = halfmark.RawKind(kind)
	x.Options, x.Analysis = opts, an
	return x, err
}

// Raw implements halfmark.RawService.
func (d *DB) Raw(ctx context.Context, id int64) (halfmark.RawData, error) {
	var content []byte
	x, err := scanRaw(d.Pool.QueryRow(ctx, `SELECT `+rawCols+`, content FROM raw_data WHERE id = $1`, id), &content)
	if err == pgx.ErrNoRows {
		return x, halfmark.Errorf(halfmark.ENotFound, "raw data %d does not exist", id)
	}
	x.Content = content
	return x, mapErr(err)
}

// RawForCheck implements halfmark.RawService.
func (d *DB) RawForCheck(ctx context.Context, checkID string) ([]halfmark.RawData, error) {
	if !halfmark.IsUUID(checkID) {
		return nil, nil
	}
	rows, err := d.Pool.Query(ctx, `SELECT `+rawCols+` FROM raw_data WHERE check_id = $1 ORDER BY id`, checkID)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.RawData, error) { return scanRaw(r, nil) })
	return out, mapErr(err)
}
