package db

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/jackc/pgx/v5"
	"golang.org/x/crypto/argon2"

	"halfmark"
)

// Argon2id parameters: the second recommended option of RFC 9106 §4
// (t = 3 passes, m = 64 MiB, p = 4 lanes, 128-bit salt, 256-bit tag). They
// are stored with every hash, so raising them later keeps old hashes valid.
const (
	argonTime    = 3
	argonMemKiB  = 64 * 1024
	argonThreads = 4
	argonSaltLen = 16
	argonKeyLen  = 32
)

// hashPassword returns the PHC string form of an argon2id hash:
// $argon2id$v=19$m=65536,t=3,p=4$<salt>$<hash> (base64 without padding).
func hashPassword(password string) (string, error) {
	salt := make([]byte, argonSaltLen)
	if _, err := rand.Read(salt); err != nil {
		return "", err
	}
	key := argon2.IDKey([]byte(password), salt, argonTime, argonMemKiB, argonThreads, argonKeyLen)
	b64 := base64.RawStdEncoding
	return fmt.Sprintf("$argon2id$v=%d$m=%d,t=%d,p=%d$%s$%s", argon2.Version, argonMemKiB, argonTime, argonThreads,
		b64.EncodeToString(salt), b64.EncodeToString(key)), nil
}

// verifyPassword checks password against a PHC argon2id string in constant
// time. A malformed hash is an error, never a match.
func verifyPassword(encoded, password string) (bool, error) {
	parts := strings.Split(encoded, "$")
	if len(parts) != 6 || parts[1] != "argon2id" {
		return false, errors.New("stored password hash is not an argon2id PHC string")
	}
	var v int
	var m, t uint32
	var p uint8
	if _, err := fmt.Sscanf(parts[2], "v=%d", &v); err != nil || v != argon2.Version {
		return false, fmt.Errorf("stored password hash has argon2 version %q; want v=%d", parts[2], argon2.Version)
	}
	if _, err := fmt.Sscanf(parts[3], "m=%d,t=%d,p=%d", &m, &t, &p); err != nil || m == 0 || t == 0 || p == 0 {
		return false, fmt.Errorf("stored password hash has bad parameters %q", parts[3])
	}
	b64 := base64.RawStdEncoding
	salt, err := b64.DecodeString(parts[4])
	if err != nil {
		return false, errors.New("stored password hash has a bad salt")
	}
	want, err := b64.DecodeString(parts[5])
	if err != nil || len(want) == 0 {
		return false, errors.New("stored password hash has a bad key")
	}
	got := argon2.IDKey([]byte(password), salt, t, m, p, uint32(len(want)))
	return subtle.ConstantTimeCompare(got, want) == 1, nil
}

// dummyHash is verified against when the e-mail is unknown, so that an
// unknown user takes as long to refuse as a wrong password.
var dummyHash, _ = hashPassword("halfmark-no-such-user")

const userCols = `id, email, role, created_at, created_by, locked_until`

func scanUser(r pgx.Row) (halfmark.User, error) {
	var u halfmark.User
	var role string
	err := r.Scan(&u.ID, &u.Email, &role, &u.CreatedAt, &u.CreatedBy, &u.LockedUntil)
	u.Role = halfmark.Role(role)
	return u, err
}

// CreateUser implements halfmark.UserService.
func (d *DB) CreateUser(ctx context.Context, a halfmark.Actor, email string, role halfmark.Role, password string) (halfmark.User, error) {
	var f halfmark.Fields
	e, err := halfmark.NormaliseEmail(email)
	if err != nil {
		var he *halfmark.Error
		errors.As(err, &he)
		f = append(f, he.Fields...)
	}
	if !role.Valid() {
		f.Add("role", "must be therapist, physicist or admin (got %q)", role)
	}
	if err := halfmark.ValidatePassword(password); err != nil {
		var he *halfmark.Error
		errors.As(err, &he)
		f = append(f, he.Fields...)
	}
	if err := f.Err("the user is not valid"); err != nil {
		return halfmark.User{}, err
	}
	hash, err := hashPassword(password)
	if err != nil {
		return halfmark.User{}, err
	}
	var u halfmark.User
	err = d.tx(ctx, func(tx pgx.Tx) error {
		var err error
		u, err = scanUser(tx.QueryRow(ctx, `INSERT INTO users (email, role, password_hash, created_by) VALUES ($1,$2,$3,$4)
			RETURNING `+userCols, e, string(role), hash, a.Name))
		if err != nil {
			return err
		}
		return audit(ctx, tx, a, "create", "user", strconv.FormatInt(u.ID, 10), map[string]any{"email": e, "role": role})
	})
	if halfmark.ErrorCodeOf(err) == halfmark.EConflict {
		return halfmark.User{}, halfmark.Invalid("the user is not valid", halfmark.FieldError{Field: "email", Message: e + " already has an account"})
	}
	return u, err
}

// AuthenticateUser implements halfmark.UserService. Every refusal is the
// same EUnauthorized; the failure count in the users row is for the
// administrator's view and never locks the account.
func (d *DB) AuthenticateUser(ctx context.Context, email, password string) (halfmark.User, error) {
	wrong := halfmark.Errorf(halfmark.EUnauthorized, "the e-mail or the password is wrong")
	e := strings.ToLower(strings.TrimSpace(email))
	if len(password) > 4*halfmark.MaxPasswordLength || halfmark.CheckText("email", e, 1, halfmark.MaxNameLength) != nil {
		_, _ = verifyPassword(dummyHash, password) // the same time as for a real account
		return halfmark.User{}, wrong
	}
	var u halfmark.User
	var result error
	err := d.tx(ctx, func(tx pgx.Tx) error {
		var hash string
		var failed int
		var role string
		err := tx.QueryRow(ctx, `SELECT id, email, role, created_at, created_by, locked_until, password_hash, failed_sign_ins
			FROM users WHERE email = $1 FOR UPDATE`, e).Scan(&u.ID, &u.Email, &role, &u.CreatedAt, &u.CreatedBy, &u.LockedUntil, &hash, &failed)
		u.Role = halfmark.Role(role)
		if err == pgx.ErrNoRows {
			_, _ = verifyPassword(dummyHash, password)
			result = wrong
			return nil
		}
		if err != nil {
			return err
		}
		ok, err := verifyPassword(hash, password)
		if err != nil {
			return err
		}
		if ok {
			u.LockedUntil = nil
			_, err := tx.Exec(ctx, `UPDATE users SET failed_sign_ins = 0, locked_until = NULL WHERE id = $1 AND failed_sign_ins <> 0`, u.ID)
			return err
		}
		// Counted for the administrator's view only: the account is never
		// locked here, so that a stranger cannot lock a user out (the
		// dashboard slows guessing per account and address instead).
		result = wrong
		_, err = tx.Exec(ctx, `UPDATE users SET failed_sign_ins = failed_sign_ins + 1 WHERE id = $1`, u.ID)
		return err
	})
	if err != nil {
		return halfmark.User{}, err
	}
	if result != nil {
		return halfmark.User{}, result
	}
	return u, nil
}

// User implements halfmark.UserService.
func (d *DB) User(ctx context.Context, id int64) (halfmark.User, error) {
	u, err := scanUser(d.Pool.QueryRow(ctx, `SELECT `+userCols+` FROM users WHERE id = $1`, id))
	if err == pgx.ErrNoRows {
		return u, halfmark.Errorf(halfmark.ENotFound, "user %d does not exist", id)
	}
	return u, mapErr(err)
}

// sessionTouchEvery limits session writes: the idle timer is renewed at
// most once a minute, so reading a page does not always write a row.
const sessionTouchEvery = time.Minute

// CreateSession implements halfmark.SessionService.
func (d *DB) CreateSession(ctx context.Context, userID int64) (string, error) {
	buf := make([]byte, 32)
	if _, err := rand.Read(buf); err != nil {
		return "", err
	}
	token := base64.RawURLEncoding.EncodeToString(buf)
	sum := sha256.Sum256([]byte(token))
	now := d.Now()
	_, err := d.Pool.Exec(ctx, `INSERT INTO sessions (token_sha256, user_id, created_at, last_seen_at) VALUES ($1,$2,$3,$3)`,
		sum[:], userID, now)
	if err != nil {
		return "", mapErr(err)
	}
	return token, nil
}

// SessionUser implements halfmark.SessionService.
func (d *DB) SessionUser(ctx context.Context, token string, idle, maxAge time.Duration) (halfmark.User, error) {
	gone := halfmark.Errorf(halfmark.EUnauthorized, "the session has ended; sign in again")
	if token == "" || len(token) > 100 {
		return halfmark.User{}, gone
	}
	sum := sha256.Sum256([]byte(token))
	now := d.Now()
	var created, seen time.Time
	var role string
	var u halfmark.User
	err := d.Pool.QueryRow(ctx, `SELECT s.created_at, s.last_seen_at, u.id, u.email, u.role, u.created_at, u.created_by, u.locked_until
		FROM sessions s JOIN users u ON u.id = s.user_id WHERE s.token_sha256 = $1`, sum[:]).
		Scan(&created, &seen, &u.ID, &u.Email, &role, &u.CreatedAt, &u.CreatedBy, &u.LockedUntil)
	u.Role = halfmark.Role(role)
	if err == pgx.ErrNoRows {
		return halfmark.User{}, gone
	}
	if err != nil {
		return halfmark.User{}, mapErr(err)
	}
	if now.Sub(seen) > idle || now.Sub(created) > maxAge {
		_, _ = d.Pool.Exec(ctx, `DELETE FROM sessions WHERE token_sha256 = $1`, sum[:])
		return halfmark.User{}, gone
	}
	if now.Sub(seen) > sessionTouchEvery {
		if _, err := d.Pool.Exec(ctx, `UPDATE sessions SET last_seen_at = $2 WHERE token_sha256 = $1`, sum[:], now); err != nil {
			return halfmark.User{}, mapErr(err)
		}
	}
	return u, nil
}

// EndSession implements halfmark.SessionService.
func (d *DB) EndSession(ctx context.Context, token string) error {
	sum := sha256.Sum256([]byte(token))
	_, err := d.Pool.Exec(ctx, `DELETE FROM sessions WHERE token_sha256 = $1`, sum[:])
	return mapErr(err)
}

// SignReport implements halfmark.SignOffService.
func (d *DB) SignReport(ctx context.Context, a halfmark.Actor, machineID int64, month, comment string) error {
	if !a.Role.Allows(halfmark.RolePhysicist) {
		return halfmark.Errorf(halfmark.EForbidden, "signing a report needs the physicist role; you have the %s role", a.Role)
	}
	if err := halfmark.ValidateSignOff(month, comment, d.Now()); err != nil {
		return err
	}
	if _, err := d.Machine(ctx, machineID); err != nil {
		return err
	}
	return d.tx(ctx, func(tx pgx.Tx) error {
		return audit(ctx, tx, a, "sign", "report", halfmark.ReportEntityID(machineID, month),
			map[string]any{"machine_id": machineID, "month": month, "comment": comment, "user_id": a.UserID})
	})
}
