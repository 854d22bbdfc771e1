package lab

import (
	"slices"

	"curvekeeper/calib"
)

// driftHistory is how many of the most recent approved curves a new curve's
// slope is judged against at ingest.
const driftHistory = 20

// addDriftChecks adds the drift check to each fitted curve of a new run: its
// slope against the slopes of the same instrument and analyte's most recent
// approved curves (hist, per analyte, read with the method before the
// transaction opens; see RunStore.ReadForRun). The check is advisory unless the
// method makes it mandatory; an advisory check that cannot be computed (too
// little history) is left out, a mandatory one is reported as not computed
// and fails the verdict, as every mandatory check does.
func addDriftChecks(m *Method, hist map[string][]float64, curves []CurveInput) {
	mandatory := slices.Contains(m.Options().Policy.Mandatory, calib.CheckDrift)
	for _, c := range curves {
		r := c.Report
		slope, ok := r.Slope()
		if !ok {
			continue
		}
		ch := calib.DriftCheck("slope", hist[c.Analyte], slope)
		if !ch.Computed && !mandatory {
			continue
		}
		ch.Mandatory = mandatory
		if mandatory && !ch.Computed {
			ch.Detail += " This check is mandatory under the policy, so not computing it fails the verdict."
		}
		r.Checks = append(r.Checks, ch)
		if mandatory && !ch.Passed {
			r.Verdict = VerdictFail
		}
	}
}
