package store_test

import (
	"context"
	"testing"

	"curvekeeper/store/dbtest"
)

// TestIntegerIDsFitJavaScript: result ids and feed positions stop at
// 2^53 - 1 (Number.MAX_SAFE_INTEGER, ECMA-262 §21.1.2.6), the largest integer
// a JSON client in JavaScript reads exactly.
func TestIntegerIDsFitJavaScript(t *testing.T) {
	t.Parallel()
	db := dbtest.NewDB(t)
	for _, seq := range []string{"sample_results_id_seq", "result_events_seq_seq"} {
		var maxValue int64
		err := db.Pool.QueryRow(context.Background(),
			`SELECT max_value FROM pg_sequences WHERE sequencename = $1`, seq).Scan(&maxValue)
		if err != nil {
			t.Fatalf("%s: %v", seq, err)
		}
		if want := int64(1)<<53 - 1; maxValue != want {
			t.Errorf("%s max_value %d, want %d", seq, maxValue, want)
		}
	}
}
