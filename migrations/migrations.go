// Package migrations carries Halfmark's numbered SQL migrations (goose
// format) embedded in the binary.
package migrations

import "embed"

// FS holds the *.sql migration files.
//
//go:embed *.sql
var FS embed.FS
