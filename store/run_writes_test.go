package store_test

import (
	"context"
	"fmt"
	"reflect"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"curvekeeper/lab"
	"curvekeeper/store"
)

// groupRun is run i of the group tests: both analytes, two samples, its own
// instrument time and idempotency key.
func groupRun(m *lab.Method, tokenID string, i int) (lab.RunInput, []lab.CurveInput) {
	in, curves := runInput(m, baseTime.Add(time.Duration(i)*time.Minute))
	in.Instrument = fmt.Sprintf("ic-%02d", i%3)
	in.TokenID, in.IdempotencyKey = tokenID, fmt.Sprintf("run-%d", i)
	if i%2 == 1 {
		in.Operator = "" // NULL operators in a group too
		in.Samples = nil // and a run without samples
	}
	return in, curves
}

// uuidText is an id as reasons and texts quote it.
var uuidText = regexp.MustCompile(`[0-9a-f]{8}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{4}-[0-9a-f]{12}`)

// dump is every row a run's write leaves, in an order and form that do not
// depend on ids, identity values or the clock: what must not differ between
// runs written in a group and the same runs written alone.
func dump(t *testing.T, db *store.DB) map[string][]string {
	t.Helper()
	queries := map[string]string{
		"runs": `SELECT concat_ws('|', method, method_revision, instrument, acquired_at, operator, received_by,
		                 source_format, encode(request_hash, 'hex'), payload::text)
		         FROM runs ORDER BY acquired_at`,
		"readings": `SELECT concat_ws('|', r.acquired_at, g.analyte, g.level, g.replicate, g.standard, g.concentration, g.response)
		             FROM readings g JOIN runs r ON r.id = g.run_id ORDER BY r.acquired_at, g.standard, g.replicate`,
		"run_samples": `SELECT concat_ws('|', r.acquired_at, s.position, s.sample_id, s.analyte, s.responses, s.dilution, s.acquired_at)
		                FROM run_samples s JOIN runs r ON r.id = s.run_id ORDER BY r.acquired_at, s.position`,
		"curves": `SELECT concat_ws('|', method, method_revision, instrument, analyte, unit, model, weighting, verdict, status,
		                  engine_version, report::text, acquired_at, created_by, slope, intercept, residual_sd, r_squared, lod,
		                  failed_checks, revision_of IS NULL, reviewed_at IS NULL)
		           FROM curves ORDER BY acquired_at, analyte`,
		// The run's audit detail names its curves by id; the count stands in.
		"audit": `SELECT concat_ws('|', a.actor, a.action, a.entity_type,
		                 (a.detail - 'curves' - 'run_id')::text, jsonb_array_length(a.detail->'curves'))
		          FROM audit a
		          LEFT JOIN runs r ON a.entity_type = 'run' AND r.id::text = a.entity_id
		          LEFT JOIN curves c ON a.entity_type = 'curve' AND c.id::text = a.entity_id
		          WHERE a.action <> 'method.create'
		          ORDER BY coalesce(r.acquired_at, c.acquired_at), a.entity_type DESC, c.analyte`,
		"sample_results": `SELECT concat_ws('|', s.sample_id, s.analyte, s.unit, s.acquired_at, s.responses, s.dilution,
		                          s.mean_response, s.concentration, s.standard_error, s.interval_low, s.interval_high,
		                          s.interval_level, s.interval_bounded, s.interval_method, s.flags, s.release_state,
		                          s.release_reason, s.created_by, c.analyte)
		                   FROM sample_results s JOIN curves c ON c.id = s.curve_id JOIN runs r ON r.id = s.run_id
		                   ORDER BY r.acquired_at, s.id`,
		"result_events": `SELECT concat_ws('|', s.sample_id, e.kind, e.cause, e.release_state, e.previous_state, e.reason)
		                  FROM result_events e JOIN sample_results s ON s.id = e.result_id JOIN runs r ON r.id = s.run_id
		                  ORDER BY r.acquired_at, e.seq`,
		"idempotency_keys": `SELECT concat_ws('|', k.key, encode(k.request_hash, 'hex'), k.response_status,
		                            jsonb_array_length(k.response_body->'curves'), k.response_body->>'id' = r.id::text)
		                     FROM idempotency_keys k JOIN runs r ON r.id = k.run_id ORDER BY k.key`,
	}
	out := map[string][]string{}
	for table, q := range queries {
		rows, err := db.Pool.Query(context.Background(), q)
		if err != nil {
			t.Fatalf("dump %s: %v", table, err)
		}
		for rows.Next() {
			var line string
			if err := rows.Scan(&line); err != nil {
				t.Fatalf("dump %s: %v", table, err)
			}
			out[table] = append(out[table], uuidText.ReplaceAllString(line, "<id>"))
		}
		if rows.Err() != nil {
			t.Fatalf("dump %s: %v", table, rows.Err())
		}
	}
	return out
}

// writeGroup makes CreateRun calls for ins at once while writes are held, so
// that they are written as one group, and returns their outcomes in order.
func writeGroup(t *testing.T, db *store.DB, ins []lab.RunInput, curves [][]lab.CurveInput) ([]*lab.RunCreated, []error) {
	t.Helper()
	waitQueued, release := store.HoldRunWrites(db)
	created, errs := make([]*lab.RunCreated, len(ins)), make([]error, len(ins))
	var wg sync.WaitGroup
	for i := range ins {
		wg.Add(1)
		go func() {
			defer wg.Done()
			created[i], errs[i] = db.CreateRun(context.Background(), ins[i], curves[i])
		}()
	}
	waitQueued(t, len(ins))
	release()
	wg.Wait()
	return created, errs
}

// TestGroupWriteIsTheSameAsAlone writes the same six runs (with and without
// samples, keys, operators) alone into one database and as one group into
// another, and compares every row they left.
func TestGroupWriteIsTheSameAsAlone(t *testing.T) {
	ctx := context.Background()
	alone, grouped := newDB(t), newDB(t)
	const n = 6
	var ins [2][]lab.RunInput
	var curves [2][][]lab.CurveInput
	for k, db := range []*store.DB{alone, grouped} {
		m := mustMethod(t, db, "nitrate-ic")
		tokenID, _, err := db.CreateToken(ctx, "ic", []string{"runs:write"}, "admin")
		if err != nil {
			t.Fatal(err)
		}
		for i := range n {
			in, c := groupRun(m, tokenID, i)
			ins[k], curves[k] = append(ins[k], in), append(curves[k], c)
		}
	}
	for i := range n {
		if _, err := store.CreateRunAlone(ctx, alone, ins[0][i], curves[0][i]); err != nil {
			t.Fatalf("run %d alone: %v", i, err)
		}
	}
	g0, a0 := store.RunWriteCounts(grouped)
	created, errs := writeGroup(t, grouped, ins[1], curves[1])
	for i, err := range errs {
		if err != nil || created[i].Replayed || len(created[i].Curves) != 2 {
			t.Fatalf("run %d in the group: %+v, %v", i, created[i], err)
		}
	}
	if g, a := store.RunWriteCounts(grouped); g-g0 != n || a != a0 {
		t.Fatalf("written in groups %d, alone %d; want all %d in groups", g-g0, a-a0, n)
	}

	want, got := dump(t, alone), dump(t, grouped)
	for table, rows := range want {
		if len(rows) == 0 {
			t.Errorf("%s: no rows written alone; the comparison would be empty", table)
		}
		if !reflect.DeepEqual(got[table], rows) {
			t.Errorf("%s differs:\n grouped %s\n   alone %s", table, strings.Join(got[table], "\n         "), strings.Join(rows, "\n         "))
		}
	}
	// Each run reads back as written, with the ids its caller was given.
	for i, c := range created {
		run, err := grouped.GetRun(ctx, c.ID)
		if err != nil {
			t.Fatalf("GetRun %d: %v", i, err)
		}
		if !reflect.DeepEqual(run.Standards, ins[1][i].Standards) || run.Curves[0].ID != c.Curves[0].ID {
			t.Errorf("run %d read back %+v, want standards %+v and curves %+v", i, run, ins[1][i].Standards, c.Curves)
		}
	}
}

// TestGroupWithABadRunFallsBack puts into one group a run whose sample id
// repeats, two requests with one idempotency key and good runs: the group
// fails as a whole, leaves nothing, and each run then gets its own answer.
func TestGroupWithABadRunFallsBack(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	m := mustMethod(t, db, "nitrate-ic")
	tokenID, _, err := db.CreateToken(ctx, "ic", []string{"runs:write"}, "admin")
	if err != nil {
		t.Fatal(err)
	}
	var ins []lab.RunInput
	var curves [][]lab.CurveInput
	for i := range 4 {
		in, c := groupRun(m, tokenID, 2*i) // every run with samples
		ins, curves = append(ins, in), append(curves, c)
	}
	ins[1].Samples = append(ins[1].Samples, lab.Sample{ID: "WS-0001", Analyte: "nitrate", Responses: []float64{3}})
	ins = append(ins, ins[2]) // a retry of run 2 with its key, in the same group
	curves = append(curves, curves[2])

	g0, a0 := store.RunWriteCounts(db)
	created, errs := writeGroup(t, db, ins, curves)
	if g, a := store.RunWriteCounts(db); g != g0 || a-a0 != int64(len(ins)) {
		t.Fatalf("written in groups %d, alone %d; want the group refused and all %d alone", g-g0, a-a0, len(ins))
	}
	wantKind(t, errs[1], lab.KindInvalid)
	for _, i := range []int{0, 2, 3, 4} {
		if errs[i] != nil {
			t.Fatalf("run %d: %v", i, errs[i])
		}
	}
	if created[2].ID != created[4].ID || created[2].Replayed == created[4].Replayed {
		t.Errorf("one key twice: %+v and %+v, want one stored and one replayed", created[2], created[4])
	}
	if n := count(t, db, "runs"); n != 3 {
		t.Errorf("runs = %d, want 3 (the bad run and the retry store nothing)", n)
	}
	if n := count(t, db, "curves"); n != 6 {
		t.Errorf("curves = %d, want 6", n)
	}
	if n := count(t, db, "sample_results"); n != 6 {
		t.Errorf("results = %d, want 6 (two per stored run)", n)
	}
	if n := count(t, db, "result_events"); n != 6 {
		t.Errorf("events = %d, want 6", n)
	}
	if n := count(t, db, "audit WHERE action <> 'method.create' AND action <> 'token.create'"); n != 9 {
		t.Errorf("audit rows = %d, want 9 (a run and two curves, three times)", n)
	}
}

// TestReadForRunMethodDecodes reads a method for runs through the cache of
// decoded revisions: the same as GetMethod each time, unchanged by what a
// caller does with its copy, and a new revision seen at once.
func TestReadForRunMethodDecodes(t *testing.T) {
	ctx := context.Background()
	db := newDB(t)
	m := mustMethod(t, db, "nitrate-ic")
	q := lab.RunReadsQuery{Method: m.Name, Instrument: "ic-02", Analytes: []string{"nitrate"}, Before: baseTime, Limit: 5}
	for i := range 3 {
		reads, err := db.ReadForRun(ctx, q)
		if err != nil {
			t.Fatal(err)
		}
		want, err := db.GetMethod(ctx, m.Name)
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(reads.Method, want) {
			t.Fatalf("read %d: method %+v, want %+v", i, reads.Method, want)
		}
		// The caller's copy is its own.
		reads.Method.Analytes[0].Unit = "changed"
		reads.Method.Acceptance.Mandatory = append(reads.Method.Acceptance.Mandatory[:0], "changed")
	}
	in := methodInput(m.Name)
	in.Confidence = 0.99
	revised, created, err := db.CreateMethod(ctx, in, "admin")
	if err != nil || !created || revised.Revision != 2 {
		t.Fatalf("revise: %+v, %v, %v", revised, created, err)
	}
	reads, err := db.ReadForRun(ctx, q)
	if err != nil {
		t.Fatal(err)
	}
	if reads.Method.Revision != 2 || reads.Method.Confidence != 0.99 {
		t.Errorf("after the revision: revision %d confidence %g, want 2 and 0.99", reads.Method.Revision, reads.Method.Confidence)
	}
}
