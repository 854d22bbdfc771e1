package store_test

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"testing"
	"time"

	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store"
)

// The fixtures describe an invented water lab: method "nitrate-ic" on an
// invented ion chromatograph "ic-02".

// wantKind fails the test unless err is a *lab.Error of kind want.
func wantKind(t *testing.T, err error, want lab.Kind) {
	t.Helper()
	var se *lab.Error
	if !errors.As(err, &se) {
		t.Fatalf("error = %v (%T), want a *lab.Error of kind %d", err, err, want)
	}
	if se.Kind != want {
		t.Fatalf("error kind = %d (%v), want %d", se.Kind, err, want)
	}
}

func methodInput(name string) lab.MethodInput {
	return lab.MethodInput{
		Name: name, Model: calib.Linear, Weighting: calib.WeightNone, Confidence: 0.95,
		Analytes:   []lab.Analyte{{Name: "nitrate", Unit: "mg/L"}, {Name: "nitrite", Unit: "mg/L"}},
		Acceptance: calib.DefaultPolicy(),
	}
}

func mustMethod(t *testing.T, db *store.DB, name string) *lab.Method {
	t.Helper()
	m, _, err := db.CreateMethod(context.Background(), methodInput(name), "admin-test")
	if err != nil {
		t.Fatalf("CreateMethod: %v", err)
	}
	return m
}

// standards returns six levels of two replicates for analyte, on the
// invented line response = 0.02 + 1.5·conc with small alternating offsets.
func standards(analyte string) []lab.Standard {
	var out []lab.Standard
	for i, c := range []float64{0.5, 1, 2, 5, 10, 20} {
		y := 0.02 + 1.5*c
		out = append(out, lab.Standard{
			Analyte: analyte, Level: fmt.Sprintf("L%d", i+1), Concentration: c,
			Responses: []float64{y * (1 + 0.004*float64(i%3-1)), y * (1 - 0.003*float64(i%2))},
		})
	}
	return out
}

// fit fits the standards of analyte with the method's options, as the api
// does before CreateRun, falling back to a failed report.
func fit(m *lab.Method, stds []lab.Standard, analyte string) lab.CurveInput {
	var pts []calib.Point
	for _, s := range stds {
		if s.Analyte != analyte {
			continue
		}
		for _, r := range s.Responses {
			pts = append(pts, calib.Point{Level: s.Level, X: s.Concentration, Y: r})
		}
	}
	a, _ := m.Analyte(analyte)
	rep, err := calib.Fit(pts, m.Options())
	if err != nil {
		rep = calib.FailedReport(pts, m.Options(), err)
	}
	return lab.CurveInput{Analyte: analyte, Unit: a.Unit, Report: rep}
}

// runInput is a run of both analytes on ic-02 acquired at at.
func runInput(m *lab.Method, at time.Time) (lab.RunInput, []lab.CurveInput) {
	stds := append(standards("nitrate"), standards("nitrite")...)
	in := lab.RunInput{
		Method: m.Name, MethodRevision: m.Revision, Instrument: "ic-02", AcquiredAt: at,
		Operator: "analyst-a", SourceFormat: lab.FormatJSON, Actor: "token:instrument-ic-02",
		Standards: stds,
		Samples: []lab.Sample{
			{ID: "WS-0001", Analyte: "nitrate", Responses: []float64{7.1, 7.2}, Dilution: 2},
			{ID: "WS-0002", Analyte: "nitrite", Responses: []float64{0.9}},
		},
	}
	in.RequestHash = hashOf(fmt.Sprintf("%s|%v", in.Instrument, at.UnixNano()))
	return in, []lab.CurveInput{fit(m, stds, "nitrate"), fit(m, stds, "nitrite")}
}

func hashOf(s string) []byte {
	h := sha256.Sum256([]byte(s))
	return h[:]
}

func count(t *testing.T, db *store.DB, table string) int {
	t.Helper()
	var n int
	if err := db.Pool.QueryRow(context.Background(), "SELECT count(*) FROM "+table).Scan(&n); err != nil {
		t.Fatalf("count %s: %v", table, err)
	}
	return n
}

var baseTime = time.Date(2031, 3, 2, 8, 0, 0, 0, time.UTC)
