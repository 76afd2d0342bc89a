package halfmark

import (
	"context"
	"time"
)

// Token is an API token. Only a hash of the secret is stored; the secret
// is shown once when the token is created.
type Token struct {
	ID        int64      `json:"id"`
	Name      string     `json:"name"`
	Role      Role       `json:"role"`
	CreatedAt time.Time  `json:"created_at"`
	CreatedBy string     `json:"created_by"`
	RevokedAt *time.Time `json:"revoked_at,omitempty"`
}

// ActorKey is the request-context key under which the caller's Actor is
// kept: the API's token check and the dashboard's session both set it, so
// that a signed-in browser can read the API with its session.
const ActorKey = "halfmark.actor"

// AuthService issues, checks and revokes API tokens.
type AuthService interface {
	// CreateToken stores a new token and returns it with its secret (shown
	// once). EInvalid for a bad name or role.
	CreateToken(ctx context.Context, a Actor, name string, role Role) (Token, string, error)
	// Authenticate returns the actor for a secret; EUnauthorized when the
	// secret is unknown or revoked.
	Authenticate(ctx context.Context, secret string) (Actor, error)
	// RevokeToken revokes a token at once; ENotFound when absent.
	RevokeToken(ctx context.Context, a Actor, id int64) error
	// Tokens lists tokens (never their secrets).
	Tokens(ctx context.Context) ([]Token, error)
}
