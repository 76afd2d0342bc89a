package localpg

import (
	"context"
	"crypto/rand"
	"encoding/base64"
	"errors"
	"fmt"
	"io/fs"
	"net"
	"net/url"
	"os"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
)

// Password files under the data directory, mode 0600 and owned by the user
// that runs Halfmark: another OS user on the machine can reach the loopback
// port but cannot read them, so cannot log in.
const (
	superuserPasswordFile = "superuser.password"
	appPasswordFile       = "app.password"
)

// hbaConf is the client authentication of the cluster: SCRAM-SHA-256
// passwords on the unix socket and on loopback TCP, nothing else (the
// server listens on 127.0.0.1 only).
const hbaConf = `# Written by Halfmark: password (SCRAM-SHA-256) logins only, loopback only.
# TYPE  DATABASE  USER  ADDRESS       METHOD
local   all       all                 scram-sha-256
host    all       all   127.0.0.1/32  scram-sha-256
host    all       all   ::1/128       scram-sha-256
`

// randomPassword returns 32 random bytes in URL-safe base64 (256 bits).
func randomPassword() (string, error) {
	b := make([]byte, 32)
	if _, err := rand.Read(b); err != nil {
		return "", err
	}
	return base64.RawURLEncoding.EncodeToString(b), nil
}

// readPassword reads a password file; "" when it does not exist.
func readPassword(path string) (string, error) {
	b, err := os.ReadFile(path)
	if errors.Is(err, fs.ErrNotExist) {
		return "", nil
	}
	if err != nil {
		return "", err
	}
	return strings.TrimSpace(string(b)), nil
}

// writePassword writes a new random password to path with mode 0600,
// refusing to replace an existing file.
func writePassword(path string) (string, error) {
	pw, err := randomPassword()
	if err != nil {
		return "", err
	}
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return "", err
	}
	if _, err := f.WriteString(pw + "\n"); err != nil {
		f.Close()
		return "", err
	}
	return pw, f.Close()
}

// loadPasswords reads the superuser's password kept beside the cluster.
func (c *Cluster) loadPasswords() error {
	pw, err := readPassword(filepath.Join(c.DataDir, superuserPasswordFile))
	if err != nil {
		return fmt.Errorf("read the superuser password: %w", err)
	}
	c.superPassword = pw
	return nil
}

// initPasswordFile makes the superuser's password for initdb: the 0600
// file under the data directory, and a copy the server's OS user can read
// (returned; the caller removes it after initdb).
func (c *Cluster) initPasswordFile() (string, error) {
	path := filepath.Join(c.DataDir, superuserPasswordFile)
	os.Remove(path) // a left-over of an interrupted initdb: the cluster it was for was never made
	pw, err := writePassword(path)
	if err != nil {
		return "", fmt.Errorf("write %s: %w", path, err)
	}
	c.superPassword = pw
	tmp := filepath.Join(c.DataDir, "initdb.pwfile")
	os.Remove(tmp)
	if err := os.WriteFile(tmp, []byte(pw+"\n"), 0o600); err != nil {
		return "", err
	}
	if err := c.run.chown(tmp); err != nil {
		os.Remove(tmp)
		return "", err
	}
	return tmp, nil
}

// ensurePasswordAuth moves a cluster made before password authentication
// (trust on loopback) to SCRAM: it sets a random superuser password, keeps it
// in the 0600 file, writes pg_hba.conf and reloads the server. It does
// nothing when the password file exists.
func (c *Cluster) ensurePasswordAuth(ctx context.Context) error {
	if c.superPassword != "" {
		return nil
	}
	conn, err := pgx.Connect(ctx, c.URL("postgres"))
	if err != nil {
		return fmt.Errorf("connect to set a superuser password: %w", err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	path := filepath.Join(c.DataDir, superuserPasswordFile)
	pw, err := writePassword(path)
	if err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	var stmt string
	if err := conn.QueryRow(ctx, `SELECT format('ALTER ROLE %I PASSWORD %L', $1::text, $2::text)`, Superuser, pw).Scan(&stmt); err == nil {
		_, err = conn.Exec(ctx, "SET password_encryption = 'scram-sha-256'")
		if err == nil {
			_, err = conn.Exec(ctx, stmt)
		}
	}
	if err != nil {
		os.Remove(path)
		return fmt.Errorf("set the superuser password: %w", err)
	}
	hba := filepath.Join(c.pgdata, "pg_hba.conf")
	if err := os.WriteFile(hba, []byte(hbaConf), 0o600); err != nil {
		return fmt.Errorf("write %s: %w", hba, err)
	}
	if err := c.run.chown(hba); err != nil {
		return err
	}
	if _, err := conn.Exec(ctx, "SELECT pg_reload_conf()"); err != nil {
		return fmt.Errorf("reload the server configuration: %w", err)
	}
	c.superPassword = pw
	fmt.Fprintf(c.logw, "localpg: the cluster now requires passwords (SCRAM); the superuser's is in %s\n", path)
	return nil
}

// AppPassword returns the runtime role's password, kept in app.password
// (mode 0600) under the data directory, making it on first use. The role
// itself is created by `halfmark migrate` (db.MigrateWith).
func (c *Cluster) AppPassword() (string, error) {
	path := filepath.Join(c.DataDir, appPasswordFile)
	pw, err := readPassword(path)
	if err != nil || pw != "" {
		return pw, err
	}
	pw, err = writePassword(path)
	if errors.Is(err, fs.ErrExist) { // another process made it first
		return readPassword(path)
	}
	return pw, err
}

// AppURL is the connection URL of database dbname for the runtime role.
func (c *Cluster) AppURL(dbname, role string) (string, error) {
	pw, err := c.AppPassword()
	if err != nil {
		return "", fmt.Errorf("localpg: the runtime role's password: %w", err)
	}
	return connURL(c.Port, dbname, url.UserPassword(role, pw)), nil
}

func connURL(port int, dbname string, user *url.Userinfo) string {
	u := url.URL{
		Scheme:   "postgres",
		User:     user,
		Host:     net.JoinHostPort("127.0.0.1", strconv.Itoa(port)),
		Path:     "/" + dbname,
		RawQuery: "sslmode=disable",
	}
	return u.String()
}
