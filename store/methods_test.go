package store_test

import (
	"context"
	"fmt"
	"reflect"
	"sort"
	"sync"
	"testing"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

func TestCreateMethodRevisions(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	in := methodInput("nitrate-ic")

	m1, created, err := db.CreateMethod(ctx, in, "admin-test")
	if err != nil || !created || m1.Revision != 1 {
		t.Fatalf("CreateMethod = rev %v, created %v, %v; want revision 1 created", m1, created, err)
	}
	if !reflect.DeepEqual(m1.Acceptance, calib.DefaultPolicy()) {
		t.Errorf("acceptance = %+v, want calib.DefaultPolicy() %+v", m1.Acceptance, calib.DefaultPolicy())
	}

	again, created, err := db.CreateMethod(ctx, in, "admin-test")
	if err != nil || created || again.Revision != 1 {
		t.Errorf("unchanged CreateMethod = rev %d, created %v, %v; want revision 1 not created", again.Revision, created, err)
	}

	in.Weighting = calib.WeightInvX
	in.Acceptance.MinRSquared = 0.995
	m2, created, err := db.CreateMethod(ctx, in, "admin-test")
	if err != nil || !created || m2.Revision != 2 {
		t.Fatalf("changed CreateMethod = %+v, created %v, %v; want revision 2", m2, created, err)
	}

	latest, err := db.GetMethod(ctx, "nitrate-ic")
	if err != nil || latest.Revision != 2 || latest.Weighting != calib.WeightInvX || latest.Acceptance.MinRSquared != 0.995 {
		t.Errorf("GetMethod = %+v, %v; want revision 2 with 1/x and r² 0.995", latest, err)
	}
	first, err := db.GetMethodRevision(ctx, "nitrate-ic", 1)
	if err != nil || first.Weighting != calib.WeightNone || first.Acceptance.MinRSquared != 0.99 {
		t.Errorf("GetMethodRevision(1) = %+v, %v; want the original", first, err)
	}
	if got := first.Options(); got.Model != calib.Linear || got.Confidence != 0.95 || !reflect.DeepEqual(got.Policy, calib.DefaultPolicy()) {
		t.Errorf("Options() = %+v", got)
	}

	mustMethod(t, db, "ammonium-photometric")
	list, err := db.ListMethods(ctx)
	if err != nil {
		t.Fatalf("ListMethods: %v", err)
	}
	var got []string
	for _, m := range list {
		got = append(got, fmt.Sprintf("%s/%d", m.Name, m.Revision))
	}
	if want := []string{"ammonium-photometric/1", "nitrate-ic/2"}; !reflect.DeepEqual(got, want) {
		t.Errorf("ListMethods = %v, want %v", got, want)
	}

	_, err = db.GetMethod(ctx, "no-such-method")
	wantKind(t, err, lab.KindNotFound)
	_, err = db.GetMethodRevision(ctx, "nitrate-ic", 3)
	wantKind(t, err, lab.KindNotFound)

	var audits int
	if err := db.Pool.QueryRow(ctx, `SELECT count(*) FROM audit WHERE entity_type = 'method'`).Scan(&audits); err != nil {
		t.Fatal(err)
	}
	if audits != 3 {
		t.Errorf("method audit rows = %d, want 3 (two revisions and one other method)", audits)
	}
	if _, err := db.Pool.Exec(ctx, `UPDATE methods SET confidence = 0.99`); err == nil {
		t.Errorf("UPDATE methods succeeded, want the trigger to refuse it")
	}
}

func TestCreateMethodConcurrentRevisions(t *testing.T) {
	db := newDB(t)
	const n = 6
	var wg sync.WaitGroup
	revs := make([]int, n)
	errs := make([]error, n)
	for i := range n {
		wg.Add(1)
		go func() {
			defer wg.Done()
			in := methodInput("nitrate-ic")
			in.Confidence = 0.90 + float64(i)/100 // each a different method body
			m, _, err := db.CreateMethod(context.Background(), in, "admin-test")
			errs[i] = err
			if err == nil {
				revs[i] = m.Revision
			}
		}()
	}
	wg.Wait()
	for i, err := range errs {
		if err != nil {
			t.Fatalf("CreateMethod %d: %v", i, err)
		}
	}
	sort.Ints(revs)
	if want := []int{1, 2, 3, 4, 5, 6}; !reflect.DeepEqual(revs, want) {
		t.Errorf("revisions = %v, want %v", revs, want)
	}
}

func TestCreateMethodRefusesBadInput(t *testing.T) {
	db := newDB(t)
	tests := []struct {
		name   string
		change func(*lab.MethodInput)
		field  string
	}{
		{"empty name", func(m *lab.MethodInput) { m.Name = "" }, "/name"},
		{"unknown model", func(m *lab.MethodInput) { m.Model = "cubic" }, "/model"},
		{"unknown weighting", func(m *lab.MethodInput) { m.Weighting = "1/z" }, "/weighting"},
		{"confidence 1", func(m *lab.MethodInput) { m.Confidence = 1 }, "/confidence"},
		{"no analytes", func(m *lab.MethodInput) { m.Analytes = nil }, "/analytes"},
		{"analyte twice", func(m *lab.MethodInput) { m.Analytes[1].Name = m.Analytes[0].Name }, "/analytes/1/name"},
		{"no unit", func(m *lab.MethodInput) { m.Analytes[0].Unit = "" }, "/analytes/0/unit"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			in := methodInput("nitrate-ic")
			tt.change(&in)
			_, _, err := db.CreateMethod(context.Background(), in, "admin-test")
			wantKind(t, err, lab.KindInvalid)
			if got := err.(*lab.Error).Field; got != tt.field {
				t.Errorf("field = %q, want %q", got, tt.field)
			}
		})
	}
	if got := count(t, db, "methods"); got != 0 {
		t.Errorf("methods stored = %d, want 0", got)
	}
}

// TestMethodWeightOptions: a method's weighting options are stored (migration
// 000007), defaults filled, part of what makes a new revision, and passed
// to the engine; the new 1/y^0.5 scheme passes the table's CHECK.
func TestMethodWeightOptions(t *testing.T) {
	db := newDB(t)
	ctx := context.Background()
	in := methodInput("ammonium-uv")
	in.Weighting = calib.WeightInvSqrtY
	m1, _, err := db.CreateMethod(ctx, in, "admin-test")
	if err != nil {
		t.Fatal(err)
	}
	if m1.Weights != calib.DefaultWeightOptions() || m1.Options().Weights != calib.DefaultWeightOptions() {
		t.Errorf("weights %+v, want the defaults", m1.Weights)
	}
	in.Weights = calib.WeightOptions{MinReplicates: 5, LimitSigma: calib.SigmaBlank}
	m2, created, err := db.CreateMethod(ctx, in, "admin-test")
	if err != nil || !created || m2.Revision != 2 {
		t.Fatalf("changed options: %+v, created %v, %v", m2, created, err)
	}
	got, err := db.GetMethod(ctx, "ammonium-uv")
	if err != nil || got.Weights != in.Weights || got.Weighting != calib.WeightInvSqrtY {
		t.Errorf("GetMethod = %+v, %v", got, err)
	}
	in.Weights.MinReplicates = 1
	if _, _, err := db.CreateMethod(ctx, in, "admin-test"); err == nil {
		t.Error("min_replicates 1 accepted")
	}
}
