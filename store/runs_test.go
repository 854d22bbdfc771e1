package store_test

import (
	"context"
	"errors"
	"reflect"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"

	"curvekeeper/lab"
	"curvekeeper/store"
)

func TestCreateRunStoresEverything(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)

	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatalf("CreateRun: %v", err)
	}
	if created.Replayed || len(created.Curves) != 2 || created.Curves[0].Analyte != "nitrate" {
		t.Fatalf("CreateRun = %+v, want two new curves", created)
	}

	got, err := db.GetRun(ctx, created.ID)
	if err != nil {
		t.Fatalf("GetRun: %v", err)
	}
	if !reflect.DeepEqual(got.Standards, in.Standards) {
		t.Errorf("standards as stored:\n got %+v\nwant %+v", got.Standards, in.Standards)
	}
	wantSamples := []lab.Sample{
		{ID: "WS-0001", Analyte: "nitrate", Responses: []float64{7.1, 7.2}, Dilution: 2},
		{ID: "WS-0002", Analyte: "nitrite", Responses: []float64{0.9}, Dilution: 1},
	}
	if !reflect.DeepEqual(got.Samples, wantSamples) {
		t.Errorf("samples = %+v, want %+v", got.Samples, wantSamples)
	}
	if got.Method != m.Name || got.MethodRevision != 1 || got.Instrument != "ic-02" || got.Operator != "analyst-a" ||
		!got.AcquiredAt.Equal(baseTime) || got.SourceFormat != lab.FormatJSON || got.ReceivedBy != in.Actor {
		t.Errorf("run row = %+v", got)
	}
	if len(got.Curves) != 2 || got.Curves[0].ID != created.Curves[0].ID || got.Curves[0].Status != lab.StatusPendingReview {
		t.Errorf("curves of run = %+v, want %+v pending review", got.Curves, created.Curves)
	}

	if n := count(t, db, "readings"); n != 24 {
		t.Errorf("readings = %d, want 24 (2 analytes × 6 levels × 2 replicates)", n)
	}
	var actions []string
	rows, err := db.Pool.Query(ctx, `SELECT action FROM audit ORDER BY id`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var a string
		if err := rows.Scan(&a); err != nil {
			t.Fatal(err)
		}
		actions = append(actions, a)
	}
	if want := []string{"method.create", "run.create", "curve.create", "curve.create"}; !reflect.DeepEqual(actions, want) {
		t.Errorf("audit actions = %v, want %v", actions, want)
	}
	var payloadInstrument string
	if err := db.Pool.QueryRow(ctx, `SELECT payload->>'instrument' FROM runs WHERE id = $1`, created.ID).Scan(&payloadInstrument); err != nil || payloadInstrument != "ic-02" {
		t.Errorf("payload instrument = %q, %v", payloadInstrument, err)
	}

	_, err = db.GetRun(ctx, "0190a1b2-0000-7000-8000-000000000000")
	wantKind(t, err, lab.KindNotFound)
	_, err = db.GetRun(ctx, "run-1")
	wantKind(t, err, lab.KindNotFound)
}

func TestCreateRunKeepsAFailedFit(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, _ := runInput(m, baseTime)
	in.Standards = []lab.Standard{{Analyte: "nitrate", Level: "L1", Concentration: 1, Responses: []float64{1.5, 1.5, 1.5}}}
	in.Samples = nil
	c := fit(m, in.Standards, "nitrate")
	if c.Report.Verdict != lab.VerdictFail || len(c.Report.Coefficients) != 0 {
		t.Fatalf("fixture: one level fitted to %+v, want a failed report without coefficients", c.Report.Coefficients)
	}
	created, err := db.CreateRun(ctx, in, []lab.CurveInput{c})
	if err != nil {
		t.Fatalf("CreateRun: %v", err)
	}
	curve, err := db.GetCurve(ctx, created.Curves[0].ID)
	if err != nil {
		t.Fatalf("GetCurve: %v", err)
	}
	if curve.Verdict != lab.VerdictFail || curve.Slope != nil || curve.RSquared != nil || curve.LOD != nil {
		t.Errorf("failed curve = verdict %s slope %v r² %v lod %v, want fail with NULL scalars",
			curve.Verdict, curve.Slope, curve.RSquared, curve.LOD)
	}
	if n := count(t, db, "readings"); n != 3 {
		t.Errorf("readings = %d, want 3: the raw data is kept", n)
	}
}

func TestCreateRunIdempotencyKey(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	tokenA, _, err := db.CreateToken(ctx, "ic-02", []string{lab.ScopeRunsWrite}, "admin-test")
	if err != nil {
		t.Fatal(err)
	}
	tokenB, _, err := db.CreateToken(ctx, "ic-03", []string{lab.ScopeRunsWrite}, "admin-test")
	if err != nil {
		t.Fatal(err)
	}
	in, curves := runInput(m, baseTime)
	in.IdempotencyKey, in.TokenID = "run-2031-03-02-0800", tokenA

	first, err := db.CreateRun(ctx, in, curves)
	if err != nil || first.Replayed {
		t.Fatalf("first CreateRun = %+v, %v", first, err)
	}
	again, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatalf("replayed CreateRun: %v", err)
	}
	if !again.Replayed || again.ID != first.ID || !reflect.DeepEqual(again.Curves, first.Curves) {
		t.Errorf("replay = %+v, want the original %+v with Replayed", again, first)
	}
	looked, err := db.LookupIdempotency(ctx, tokenA, in.IdempotencyKey, in.RequestHash)
	if err != nil || looked.ID != first.ID {
		t.Errorf("LookupIdempotency = %+v, %v; want run %s", looked, err, first.ID)
	}
	if n := count(t, db, "runs"); n != 1 {
		t.Errorf("runs = %d after a replay, want 1", n)
	}

	other := in
	other.RequestHash = hashOf("another body")
	_, err = db.CreateRun(ctx, other, curves)
	wantKind(t, err, lab.KindInvalid)
	if msg := err.(*lab.Error).Message; msg != "Idempotency-Key reused with a different body" {
		t.Errorf("message = %q", msg)
	}
	_, err = db.LookupIdempotency(ctx, tokenA, in.IdempotencyKey, other.RequestHash)
	wantKind(t, err, lab.KindInvalid)
	_, err = db.LookupIdempotency(ctx, tokenA, "never-used", in.RequestHash)
	wantKind(t, err, lab.KindNotFound)
	// ReadForRun makes LookupIdempotency's decisions in its batch.
	q := lab.RunReadsQuery{TokenID: tokenA, Key: in.IdempotencyKey, RequestHash: in.RequestHash,
		Method: m.Name, Instrument: in.Instrument, Before: in.AcquiredAt, Limit: 20}
	reads, err := db.ReadForRun(ctx, q)
	if err != nil || reads.Replay == nil || reads.Replay.ID != first.ID || !reads.Replay.Replayed {
		t.Errorf("ReadForRun = %+v, %v; want the replay of run %s", reads, err, first.ID)
	}
	q.RequestHash = other.RequestHash
	_, err = db.ReadForRun(ctx, q)
	wantKind(t, err, lab.KindInvalid)
	q.Key, q.RequestHash = "never-used", in.RequestHash
	reads, err = db.ReadForRun(ctx, q)
	if err != nil || reads.Replay != nil || reads.Method == nil || reads.Method.Name != m.Name {
		t.Errorf("ReadForRun with an unused key = %+v, %v; want the method and no replay", reads, err)
	}

	// The same key from another token is another request.
	byB := in
	byB.TokenID = tokenB
	fromB, err := db.CreateRun(ctx, byB, curves)
	if err != nil || fromB.Replayed || fromB.ID == first.ID {
		t.Errorf("CreateRun by another token = %+v, %v; want a new run", fromB, err)
	}
	if n := count(t, db, "runs"); n != 2 {
		t.Errorf("runs = %d, want 2", n)
	}
}

func TestCreateRunConcurrentSameKey(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	token, _, err := db.CreateToken(ctx, "ic-02", []string{lab.ScopeRunsWrite}, "admin-test")
	if err != nil {
		t.Fatal(err)
	}
	const n = 8
	var (
		wg      sync.WaitGroup
		start   = make(chan struct{})
		results = make([]*lab.RunCreated, n)
		errs    = make([]error, n)
	)
	for i := range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			in, curves := runInput(m, baseTime)
			in.IdempotencyKey, in.TokenID = "retry-me", token
			<-start
			results[i], errs[i] = db.CreateRun(ctx, in, curves)
		}()
	}
	close(start)
	wg.Wait()
	fresh := 0
	for i := range n {
		if errs[i] != nil {
			t.Fatalf("CreateRun %d: %v", i, errs[i])
		}
		if results[i].ID != results[0].ID {
			t.Errorf("CreateRun %d returned run %s, others %s", i, results[i].ID, results[0].ID)
		}
		if !results[i].Replayed {
			fresh++
		}
	}
	if fresh != 1 {
		t.Errorf("%d calls stored a run, want exactly 1", fresh)
	}
	for table, want := range map[string]int{"runs": 1, "curves": 2, "readings": 24, "idempotency_keys": 1} {
		if got := count(t, db, table); got != want {
			t.Errorf("%s = %d, want %d", table, got, want)
		}
	}
}

func TestCreateRunRefusesBadInput(t *testing.T) {
	db := newDB(t)
	m := mustMethod(t, db, "nitrate-ic")
	tests := []struct {
		name   string
		change func(*lab.RunInput)
		field  string
	}{
		{"no instrument", func(in *lab.RunInput) { in.Instrument = "" }, "/instrument"},
		{"time before year 1 in UTC", func(in *lab.RunInput) { in.AcquiredAt = time.Date(1, 1, 1, 13, 0, 0, 0, time.FixedZone("", 14*3600)) }, "/acquired_at"},
		{"no standards", func(in *lab.RunInput) { in.Standards = nil }, "/standards"},
		{"negative concentration", func(in *lab.RunInput) { in.Standards[2].Concentration = -1 }, "/standards/2/concentration"},
		{"NaN response", func(in *lab.RunInput) { in.Standards[1].Responses[1] = nanValue() }, "/standards/1/responses/1"},
		{"duplicate level", func(in *lab.RunInput) { in.Standards[3].Level = in.Standards[2].Level }, "/standards/3/level"},
		{"no responses", func(in *lab.RunInput) { in.Standards[0].Responses = nil }, "/standards/0/responses"},
		{"negative dilution", func(in *lab.RunInput) { in.Samples[0].Dilution = -2 }, "/samples/0/dilution"},
		{"sample without id", func(in *lab.RunInput) { in.Samples[1].ID = "" }, "/samples/1/id"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			in, curves := runInput(m, baseTime)
			tt.change(&in)
			_, err := db.CreateRun(context.Background(), in, curves)
			wantKind(t, err, lab.KindInvalid)
			if got := err.(*lab.Error).Field; got != tt.field {
				t.Errorf("field = %q, want %q", got, tt.field)
			}
		})
	}
	t.Run("unknown method revision", func(t *testing.T) {
		in, curves := runInput(m, baseTime)
		in.MethodRevision = 9
		_, err := db.CreateRun(context.Background(), in, curves)
		wantKind(t, err, lab.KindInvalid)
		if got := err.(*lab.Error).Field; got != "/method" {
			t.Errorf("field = %q, want /method", got)
		}
	})
	for _, table := range []string{"runs", "readings", "run_samples", "curves"} {
		if got := count(t, db, table); got != 0 {
			t.Errorf("%s = %d after refused input, want 0", table, got)
		}
	}
	if got := count(t, db, "audit"); got != 1 {
		t.Errorf("audit = %d, want 1 (the method only)", got)
	}
}

func nanValue() float64 {
	zero := 0.0
	return zero / zero
}

// TestEvidenceIsImmutable runs, as the table owner, statements that would
// change or remove evidence; the schema's triggers must refuse each with
// SQLSTATE CK001.
func TestEvidenceIsImmutable(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	m := mustMethod(t, db, "nitrate-ic")
	in, curves := runInput(m, baseTime)
	created, err := db.CreateRun(ctx, in, curves)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := db.ReviewCurve(ctx, created.Curves[1].ID, lab.DecisionReject, "L6 saturated", "qa-test"); err != nil {
		t.Fatal(err)
	}
	stmts := []struct{ name, sql string }{
		{"update audit", `UPDATE audit SET actor = 'someone else'`},
		{"delete audit", `DELETE FROM audit`},
		{"truncate audit", `TRUNCATE audit`},
		{"update readings", `UPDATE readings SET response = response * 2`},
		{"delete readings", `DELETE FROM readings`},
		{"truncate readings", `TRUNCATE readings CASCADE`},
		{"update runs", `UPDATE runs SET instrument = 'ic-99'`},
		{"delete runs", `DELETE FROM runs`},
		{"update samples", `UPDATE run_samples SET dilution = 10`},
		{"update curve report", `UPDATE curves SET report = '{}'`},
		{"update curve verdict", `UPDATE curves SET verdict = CASE verdict WHEN 'pass' THEN 'fail' ELSE 'pass' END`},
		{"re-review a curve", `UPDATE curves SET status = 'approved' WHERE status = 'rejected'`},
		{"delete curves", `DELETE FROM curves`},
		{"update reviews", `UPDATE reviews SET reason = ''`},
		{"return a curve to review without withdrawing its review", `UPDATE curves SET status = 'pending_review', reviewed_at = NULL, reviewed_by = NULL WHERE status = 'rejected'`},
		{"withdraw a review with another change", `UPDATE reviews SET withdrawn_at = now(), withdrawn_by = 'x', withdrawal_reason = 'y', reason = ''`},
		{"delete reviews", `DELETE FROM reviews`},
		{"update methods", `UPDATE methods SET model = 'quadratic'`},
	}
	before := map[string]int{}
	for _, table := range []string{"audit", "readings", "runs", "curves", "reviews"} {
		before[table] = count(t, db, table)
	}
	for _, st := range stmts {
		t.Run(st.name, func(t *testing.T) {
			_, err := db.Pool.Exec(ctx, st.sql)
			var pgErr *pgconn.PgError
			if !errors.As(err, &pgErr) || pgErr.Code != "CK001" {
				t.Fatalf("%s: error = %v, want SQLSTATE CK001", st.sql, err)
			}
		})
	}
	for table, n := range before {
		if got := count(t, db, table); got != n {
			t.Errorf("%s = %d rows, want %d unchanged", table, got, n)
		}
	}
}

func TestDatabaseDownIsUnavailable(t *testing.T) {
	// Nothing listens on port 1; the pool connects lazily.
	pool, err := pgxpool.New(context.Background(), "postgres://postgres@127.0.0.1:1/none?sslmode=disable&connect_timeout=2")
	if err != nil {
		t.Fatal(err)
	}
	db := &store.DB{Pool: pool}
	defer db.Close()
	ctx := context.Background()
	_, err = db.GetCurve(ctx, "0190a1b2-0000-7000-8000-000000000000")
	wantKind(t, err, lab.KindUnavailable)
	_, _, err = db.CreateToken(ctx, "x", []string{lab.ScopeAdmin}, "admin-test")
	wantKind(t, err, lab.KindUnavailable)
	_, err = db.LookupToken(ctx, "ck_whatever")
	wantKind(t, err, lab.KindUnavailable)
}
