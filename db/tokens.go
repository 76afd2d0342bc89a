package db

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"

	"halfmark"
)

// tokenPrefix marks Halfmark secrets so they are recognisable in a leak scan.
const tokenPrefix = "hm_"

// hashSecret returns SHA-256 of the secret. Secrets are 256-bit random
// values, so a fast hash is enough: there is nothing to brute-force.
func hashSecret(secret string) []byte {
	s := sha256.Sum256([]byte(secret))
	return s[:]
}

// CreateToken implements halfmark.AuthService.
func (d *DB) CreateToken(ctx context.Context, a halfmark.Actor, name string, role halfmark.Role) (halfmark.Token, string, error) {
	name = strings.TrimSpace(name)
	if err := halfmark.ValidateTokenName(name); err != nil {
		return halfmark.Token{}, "", err
	}
	var f halfmark.Fields
	if !role.Valid() {
		f.Add("role", "must be therapist, physicist or admin (got %q)", role)
	}
	if err := f.Err("the token is not valid"); err != nil {
		return halfmark.Token{}, "", err
	}
	buf := make([]byte, 32)
	if _, err := rand.Read(buf); err != nil {
		return halfmark.Token{}, "", err
	}
	secret := tokenPrefix + base64.RawURLEncoding.EncodeToString(buf)
	t := halfmark.Token{Name: name, Role: role, CreatedBy: a.Name}
	err := d.tx(ctx, func(tx pgx.Tx) error {
		if err := tx.QueryRow(ctx, `INSERT INTO tokens (name, role, secret_sha256, created_by) VALUES ($1,$2,$3,$4) RETURNING id, created_at`,
			name, string(role), hashSecret(secret), a.Name).Scan(&t.ID, &t.CreatedAt); err != nil {
			return err
		}
		return audit(ctx, tx, a, "create", "token", strconv.FormatInt(t.ID, 10), map[string]any{"name": name, "role": role})
	})
	if err != nil {
		return halfmark.Token{}, "", err
	}
	return t, secret, nil
}

// Authenticate implements halfmark.AuthService.
func (d *DB) Authenticate(ctx context.Context, secret string) (halfmark.Actor, error) {
	var act halfmark.Actor
	var role string
	err := d.Pool.QueryRow(ctx, `SELECT id, name, role FROM tokens WHERE secret_sha256 = $1 AND revoked_at IS NULL`,
		hashSecret(secret)).Scan(&act.TokenID, &act.Name, &role)
	if err == pgx.ErrNoRows {
		return act, halfmark.Errorf(halfmark.EUnauthorized, "the API token is unknown or revoked")
	}
	if err != nil {
		return act, mapErr(err)
	}
	act.Role = halfmark.Role(role)
	act.Name = "token:" + act.Name
	return act, nil
}

// RevokeToken implements halfmark.AuthService.
func (d *DB) RevokeToken(ctx context.Context, a halfmark.Actor, id int64) error {
	return d.tx(ctx, func(tx pgx.Tx) error {
		tag, err := tx.Exec(ctx, `UPDATE tokens SET revoked_at = now() WHERE id = $1 AND revoked_at IS NULL`, id)
		if err != nil {
			return err
		}
		if tag.RowsAffected() == 0 {
			return halfmark.Errorf(halfmark.ENotFound, "token %d does not exist or is already revoked", id)
		}
		return audit(ctx, tx, a, "revoke", "token", strconv.FormatInt(id, 10), nil)
	})
}

// Tokens implements halfmark.AuthService.
func (d *DB) Tokens(ctx context.Context) ([]halfmark.Token, error) {
	rows, err := d.Pool.Query(ctx, `SELECT id, name, role, created_at, created_by, revoked_at FROM tokens ORDER BY id`)
	if err != nil {
		return nil, mapErr(err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (halfmark.Token, error) {
		var t halfmark.Token
		var role string
		err := r.Scan(&t.ID, &t.Name, &role, &t.CreatedAt, &t.CreatedBy, &t.RevokedAt)
		t.Role = halfmark.Role(role)
		return t, err
	})
	return out, mapErr(err)
}
