// Package migrations holds curvekeeper's database schema as numbered
// golang-migrate files (NNNNNN_name.up.sql / .down.sql), embedded in the
// binary and applied by store.MigrateUp.
package migrations

import "embed"

// FS holds every migration file.
//
//go:embed *.sql
var FS embed.FS
