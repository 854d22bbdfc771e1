package api_test

import (
	"testing"

	"curvekeeper/store/dbtest"
)

// TestMain gives the package's tests a real PostgreSQL (store/dbtest): the
// server named by DATABASE_URL, or a private cluster started for this binary.
func TestMain(m *testing.M) { dbtest.Main(m) }
