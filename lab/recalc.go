package lab

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"sort"
	"strings"

	"curvekeeper/calib"
)

// Recalculation is a curve refitted from its stored raw readings with the
// running engine and compared with the stored fit (ISO/IEC 17025 §7.11.2:
// the software's calculations are shown to be reproducible).
type Recalculation struct {
	CurveID       string
	StoredEngine  string
	RunningEngine string
	Identical     bool
	Differences   []Difference // field by field, JSON pointer into the report
	// Carried lists the report parts that cannot be recomputed from the run
	// alone and were carried from the stored fit (the drift check, which
	// depends on the history before the run).
	Carried []string
}

// Difference is one field of the report that differs.
type Difference struct {
	Field        string
	Stored       string
	Recalculated string
}

// Recalculate refits curve id from the run's stored readings (the
// exclusions of the stored fit kept) with the method revision it was fitted
// under and the running engine, and compares every field of the report.
func (s *Service) Recalculate(ctx context.Context, id string) (*Recalculation, error) {
	c, err := s.GetCurve(ctx, id)
	if err != nil {
		return nil, err
	}
	run, err := s.GetRun(ctx, c.RunID)
	if err != nil {
		return nil, err
	}
	m, err := s.GetMethodRevision(ctx, c.Method, c.MethodRevision)
	if err != nil {
		return nil, err
	}
	var pts []calib.Point
	an, _ := m.Analyte(c.Analyte)
	for _, st := range run.Standards {
		if st.Analyte != c.Analyte {
			continue
		}
		ys, err := isRatios(an, st.Responses, st.ISResponses, "")
		if err != nil { // the run was refused at ingest unless its IS responses fit the method
			ys = st.Responses
		}
		for _, y := range ys {
			pts = append(pts, calib.Point{Level: st.Level, X: st.Concentration, Y: y})
		}
	}
	stored := c.Report
	out := &Recalculation{CurveID: c.ID, StoredEngine: stored.Engine, RunningEngine: calib.EngineVersion}
	if len(pts) != len(stored.Points) {
		out.Differences = append(out.Differences, Difference{Field: "/points", Stored: fmt.Sprint(len(stored.Points)) + " readings",
			Recalculated: fmt.Sprint(len(pts)) + " readings in the stored run"})
		return out, nil
	}
	for i := range pts {
		pts[i].Excluded = stored.Points[i].Excluded
	}
	opts := m.OptionsFor(c.Analyte)
	rep, err := calib.Fit(pts, opts)
	if err != nil {
		var ie *calib.InputError
		if !errors.As(err, &ie) {
			return nil, fmt.Errorf("lab: recalculate curve %s: %w", c.ID, err)
		}
		rep = calib.FailedReport(pts, opts, err)
	}
	for _, ch := range stored.Checks {
		if ch.Name == calib.CheckDrift {
			rep.Checks = append(rep.Checks, ch)
			if ch.Mandatory && !ch.Passed {
				rep.Verdict = VerdictFail
			}
			out.Carried = append(out.Carried, "/checks/"+ch.Name)
		}
	}
	a, err := flatten(stored)
	if err != nil {
		return nil, err
	}
	b, err := flatten(rep)
	if err != nil {
		return nil, err
	}
	keys := map[string]bool{}
	for k := range a {
		keys[k] = true
	}
	for k := range b {
		keys[k] = true
	}
	for k := range keys {
		if k == "/Engine" {
			continue
		}
		if va, vb := a[k], b[k]; va != vb {
			out.Differences = append(out.Differences, Difference{Field: k, Stored: va, Recalculated: vb})
		}
	}
	sort.Slice(out.Differences, func(i, j int) bool { return out.Differences[i].Field < out.Differences[j].Field })
	out.Identical = len(out.Differences) == 0
	return out, nil
}

// flatten turns a report into JSON pointer → JSON value text, leaves only,
// as encoding/json writes it (so a float compares exactly, in its shortest
// round-trip form).
func flatten(r *calib.Report) (map[string]string, error) {
	b, err := json.Marshal(r)
	if err != nil {
		return nil, fmt.Errorf("lab: marshal report: %w", err)
	}
	var v any
	dec := json.NewDecoder(strings.NewReader(string(b)))
	dec.UseNumber()
	if err := dec.Decode(&v); err != nil {
		return nil, fmt.Errorf("lab: decode report: %w", err)
	}
	out := map[string]string{}
	var walk func(p string, v any)
	walk = func(p string, v any) {
		switch x := v.(type) {
		case map[string]any:
			for k, e := range x {
				walk(p+"/"+k, e)
			}
		case []any:
			for i, e := range x {
				walk(fmt.Sprintf("%s/%d", p, i), e)
			}
			if len(x) == 0 {
				out[p] = "[]"
			}
		case nil:
			out[p] = "null"
		default:
			out[p] = fmt.Sprint(x)
		}
	}
	walk("", v)
	return out, nil
}
