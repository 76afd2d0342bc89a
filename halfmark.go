// Package halfmark holds the domain of Halfmark: linear-accelerator machines
// and beams, QA checks with their edge results, series of edge metrics with
// their baselines, the people and tokens that write them, and the service
// interfaces that the database, HTTP, worker and dashboard packages implement
// or consume. It imports no dependency: arrows point inward.
//
// Edge convention (IEC 61217 names): jaw edges are X1, X2, Y1, Y2; an MLC
// edge is bank 1 (X1 side) or bank 2 (X2 side) plus a leaf-pair number,
// written "B1P23". An edge position is the distance in mm from the central
// axis to the edge's 50% point, projected to the isocentre plane, positive
// when the edge lies on its own side of the axis; so field width X = X1 + X2
// and the centre offset X = (X2 − X1)/2.
package halfmark

import (
	"context"
	"time"
)

// Role is what a caller may do. Each role includes the ones before it.
type Role string

// The three roles, in increasing power.
const (
	RoleTherapist Role = "therapist" // records checks
	RolePhysicist Role = "physicist" // also sets baselines, acknowledges alerts, signs reports
	RoleAdmin     Role = "admin"     // also manages machines, users and tokens
)

// Valid reports whether r is one of the three roles.
func (r Role) Valid() bool { return r.rank() > 0 }

func (r Role) rank() int {
	switch r {
	case RoleTherapist:
		return 1
	case RolePhysicist:
		return 2
	case RoleAdmin:
		return 3
	}
	return 0
}

// Allows reports whether a caller with role r may do what needs role need.
func (r Role) Allows(need Role) bool { return r.rank() >= need.rank() && need.rank() > 0 }

// Actor is the authenticated caller of a write: recorded in the audit log.
type Actor struct {
	Name    string // token name or user e-mail
	Role    Role
	TokenID int64 // 0 for a signed-in user or the CLI
	UserID  int64 // 0 for a token or the CLI
}

// CLIActor is the actor for writes made by the command line on the server.
func CLIActor(what string) Actor { return Actor{Name: "cli:" + what, Role: RoleAdmin} }

// AuditEntry is one append-only row of the audit log.
type AuditEntry struct {
	ID       int64          `json:"id"`
	At       time.Time      `json:"at"`
	Actor    string         `json:"actor"`
	Action   string         `json:"action"`
	Entity   string         `json:"entity"`
	EntityID string         `json:"entity_id"`
	Detail   map[string]any `json:"detail,omitempty"`
}

// AuditService reads the audit log; writes happen inside each service's
// own transaction so that no write goes unaudited.
type AuditService interface {
	// Audit returns the newest entries first, optionally for one entity.
	Audit(ctx context.Context, entity, entityID string, limit int) ([]AuditEntry, error)
}

// Pinger reports whether the store can be reached (for /readyz).
type Pinger interface {
	Ping(ctx context.Context) error
}
