package halfmark

import (
	"context"
	"net/mail"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"
)

// Sign-in rules. A user who fails MaxFailedSignIns times in a row is locked
// out for LockoutDuration (common practice; OWASP Authentication Cheat Sheet
// suggests a lock-out threshold and period rather than a permanent lock).
const (
	MaxFailedSignIns  = 5
	LockoutDuration   = 15 * time.Minute
	MinPasswordLength = 10  // characters (NIST SP 800-63B §5.1.1.2 asks at least 8)
	MaxPasswordLength = 256 // characters; longer input is refused before hashing
)

// User is a person who signs in to the dashboard.
type User struct {
	ID          int64      `json:"id"`
	Email       string     `json:"email"`
	Role        Role       `json:"role"`
	CreatedAt   time.Time  `json:"created_at"`
	CreatedBy   string     `json:"created_by"`
	LockedUntil *time.Time `json:"locked_until,omitempty"`
}

// Actor is the user as the author of a write.
func (u User) Actor() Actor { return Actor{Name: u.Email, Role: u.Role, UserID: u.ID} }

// NormaliseEmail trims and lower-cases an e-mail address and checks its form.
func NormaliseEmail(s string) (string, error) {
	e := strings.ToLower(strings.TrimSpace(s))
	if e == "" {
		return "", Invalid("the user is not valid", FieldError{Field: "email", Message: "is required, e.g. a.physicist@hospital.example"})
	}
	a, err := mail.ParseAddress(e)
	if err != nil || a.Address != e || len(e) > 254 {
		return "", Invalid("the user is not valid", FieldError{Field: "email", Message: "\"" + s + "\" is not an e-mail address such as a.physicist@hospital.example"})
	}
	return e, nil
}

// ValidatePassword checks a new password's length (in characters).
func ValidatePassword(p string) error {
	n := utf8.RuneCountInString(p)
	switch {
	case !utf8.ValidString(p):
		return Invalid("the password is not valid", FieldError{Field: "password", Message: "is not valid UTF-8 text"})
	case n < MinPasswordLength:
		return Invalid("the password is not valid", FieldError{Field: "password", Message: "has " + strconv.Itoa(n) + " characters; use at least " + strconv.Itoa(MinPasswordLength)})
	case n > MaxPasswordLength:
		return Invalid("the password is not valid", FieldError{Field: "password", Message: "is longer than " + strconv.Itoa(MaxPasswordLength) + " characters"})
	}
	return nil
}

// UserService stores dashboard users.
type UserService interface {
	// CreateUser stores a user with an argon2id hash of password. EInvalid
	// for a bad e-mail, role or password; EConflict when the e-mail is taken.
	CreateUser(ctx context.Context, a Actor, email string, role Role, password string) (User, error)
	// AuthenticateUser checks a password. EUnauthorized for an unknown
	// e-mail or a wrong password (the same message for both); EForbidden
	// while the user is locked out after MaxFailedSignIns failures — then
	// even the right password is refused until LockoutDuration has passed.
	AuthenticateUser(ctx context.Context, email, password string) (User, error)
	// User returns one user; ENotFound when absent.
	User(ctx context.Context, id int64) (User, error)
}

// SessionService keeps dashboard sign-in sessions on the server. The
// client holds only a random token; the store keeps its SHA-256.
type SessionService interface {
	// CreateSession starts a session for a user and returns its token.
	CreateSession(ctx context.Context, userID int64) (token string, err error)
	// SessionUser returns the user of a live session and renews its idle
	// timer. EUnauthorized when the token is unknown, idle longer than
	// idle, or older than maxAge.
	SessionUser(ctx context.Context, token string, idle, maxAge time.Duration) (User, error)
	// EndSession deletes a session (sign-out). Unknown tokens are ignored.
	EndSession(ctx context.Context, token string) error
}

// SignOffService records report sign-offs in the audit log.
type SignOffService interface {
	// SignReport records that a physicist signed a machine's monthly report
	// (month "YYYY-MM") in the audit log, entity "report", entity id
	// ReportEntityID(machineID, month). EForbidden below the physicist role.
	SignReport(ctx context.Context, a Actor, machineID int64, month, comment string) error
}

// ReportEntityID is the audit entity id of a monthly report.
func ReportEntityID(machineID int64, month string) string {
	return "machine/" + strconv.FormatInt(machineID, 10) + "/" + month
}
