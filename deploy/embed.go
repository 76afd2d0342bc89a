// Package deploy carries the example configuration that ships inside the
// binary, so that a fresh installation runs with documented defaults.
package deploy

import _ "embed"

// TolerancesExample is tolerances.example.toml: the tolerance book in force
// when no --tolerances file is given.
//
//go:embed tolerances.example.toml
var TolerancesExample []byte
