package halfmark

import (
	"fmt"
	"strconv"
	"strings"
)

// Edge is a parsed edge id: a jaw (X1, X2, Y1, Y2) or an MLC leaf end
// (bank 1 on the X1 side, bank 2 on the X2 side, leaf pair 1..200).
type Edge struct {
	Jaw      string // "X1", "X2", "Y1", "Y2" or "" for an MLC edge
	Bank     int    // 1 or 2 for an MLC edge
	LeafPair int    // 1-based leaf-pair number for an MLC edge
}

// String is the canonical edge id: "X1" or "B1P23".
func (e Edge) String() string {
	if e.Jaw != "" {
		return e.Jaw
	}
	return fmt.Sprintf("B%dP%d", e.Bank, e.LeafPair)
}

// Axis is "X" or "Y": the axis along which the edge moves. MLC leaves move
// along X.
func (e Edge) Axis() string {
	if e.Jaw != "" {
		return e.Jaw[:1]
	}
	return "X"
}

// Partner returns the opposite edge of the same pair: X1↔X2, Y1↔Y2,
// B1Pn↔B2Pn.
func (e Edge) Partner() Edge {
	switch e.Jaw {
	case "X1":
		return Edge{Jaw: "X2"}
	case "X2":
		return Edge{Jaw: "X1"}
	case "Y1":
		return Edge{Jaw: "Y2"}
	case "Y2":
		return Edge{Jaw: "Y1"}
	}
	return Edge{Bank: 3 - e.Bank, LeafPair: e.LeafPair}
}

// ParseEdge reads an edge id. Jaw names are case-insensitive; MLC edges are
// written "B1P23" (also accepted: "B1-23", "MLC1-23").
func ParseEdge(s string) (Edge, error) {
	t := strings.ToUpper(strings.TrimSpace(s))
	switch t {
	case "X1", "X2", "Y1", "Y2":
		return Edge{Jaw: t}, nil
	}
	u := strings.TrimPrefix(t, "MLC")
	u = strings.TrimPrefix(u, "B")
	if len(u) >= 3 && (u[0] == '1' || u[0] == '2') && (u[1] == 'P' || u[1] == '-' || u[1] == ':') {
		n, err := strconv.Atoi(u[2:])
		if err == nil && n >= 1 && n <= 200 {
			return Edge{Bank: int(u[0] - '0'), LeafPair: n}, nil
		}
	}
	return Edge{}, fmt.Errorf("unknown edge %q: use X1, X2, Y1, Y2 (IEC 61217 jaw names) or an MLC leaf end such as B1P23 (bank 1 or 2, leaf pair 1–200)", s)
}
