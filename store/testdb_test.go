package store_test

import (
	"testing"

	"curvekeeper/store"
	"curvekeeper/store/dbtest"
)

// TestMain gives the package's tests real PostgreSQL databases through
// dbtest: DATABASE_URL's server when set, else a private cluster.
func TestMain(m *testing.M) { dbtest.Main(m) }

// newDB returns a store on a fresh migrated database, dropped after the test.
func newDB(t *testing.T) *store.DB {
	t.Helper()
	return dbtest.NewDB(t)
}
