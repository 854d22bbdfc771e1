package sequence

import (
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"

	"curvekeeper/calib"
)

// Sources names where the rules and defaults come from.
var sources = []string{
	"Bracketing: results must be chronologically bracketed between acceptable calibration verifications; when a CCV fails, the samples since the last passing check are not reportable (TNI/EPA practice, FIELD-NOTES §8).",
	"ICV/CCV recovery 90–110 % and a CCV every 10 samples and at the end: common practice for EPA 200.8-type methods (from memory; confirm against the method).",
	"Carry-over: the blank after the highest standard ≤ 20 % of the LLOQ analyte response and ≤ 5 % of the IS response (ICH M10 §3.2.6).",
}

// Evaluate judges a sequence. Injections are taken in position order.
//
// Verifications (ICV, CCV) and continuing calibration blanks (CCB) that
// follow each other with no sample between form one check point; it passes
// when each of them passes. A check point holding a verification opens and
// closes brackets:
//
//   - passing: the samples since the previous check point become
//     reportable, bracketed by the verification that opened their bracket
//     and this one; this one opens the next bracket;
//   - failing (a verification or a CCB in it): every sample since the last
//     passing check point is withheld, and no bracket is open until the next
//     passing verification;
//
// a check point of CCBs alone closes nothing but withholds as above when one
// fails. A calibration standard starts a new calibration: samples not yet
// closed are withheld and an ICV or CCV must open the next bracket. Samples
// with no opening verification are withheld. At the end, samples awaiting a
// closing verification stay provisional, or are withheld when the sequence
// is complete.
//
// Judging the numbers: ICV/CCV recovery = 100·found/nominal within
// cfg.Verification; a blank passes when |result| ≤ its limit (a strongly
// negative blank points at a baseline fault as much as a high one).
// Method and calibration blank failures, frequency breaches and a failed
// carry-over check are reported and noted on every sample, and a sample's
// internal-standard recovery outside cfg.ISWindow on that sample; they do
// not change its state, which a qualified reviewer decides.
func Evaluate(seq Sequence, cfg Config) (Evaluation, error) {
	if err := normalise(&cfg); err != nil {
		return Evaluation{}, err
	}
	inj := slices.Clone(seq.Injections)
	sort.SliceStable(inj, func(i, j int) bool { return inj[i].Position < inj[j].Position })
	if err := validate(inj); err != nil {
		return Evaluation{}, err
	}
	ev := Evaluation{Sources: slices.Clone(sources), Cautions: calib.Cautions()}
	e := evaluator{cfg: cfg, ev: &ev, openReason: "no passing ICV or CCV precedes it"}
	for _, in := range inj {
		if err := e.step(in); err != nil {
			return Evaluation{}, err
		}
	}
	e.resolveGroup()
	e.finish(seq.Complete, inj)
	ev.CarryOver = carryOver(inj, cfg)
	if ev.CarryOver.Evaluated && !ev.CarryOver.Passed {
		e.noteAll("carry-over check failed: " + ev.CarryOver.Detail)
	}
	applyBlank(&ev, inj, cfg)
	if err := checkIS(&ev, inj, cfg.ISWindow); err != nil {
		return Evaluation{}, err
	}
	if ev.Blank.Policy != SubtractNone && !ev.Blank.Applied {
		e.noteAll(ev.Blank.Statement)
	}
	for k := range ev.Samples {
		ev.Samples[k].Notes = append(ev.Samples[k].Notes, e.batchNotes...)
	}
	return ev, nil
}

func normalise(cfg *Config) error {
	if cfg.Verification == (Window{}) {
		cfg.Verification = Window{DefaultVerificationLowPct, DefaultVerificationHighPct}
	}
	w := cfg.Verification
	if !finite(w.LowPct) || !finite(w.HighPct) || w.LowPct < 0 || !(w.LowPct < w.HighPct) {
		return inputErr("config.verification", "need 0 ≤ low < high, got %v", w)
	}
	if cfg.MaxSamplesBetweenChecks == 0 {
		cfg.MaxSamplesBetweenChecks = DefaultMaxSamplesBetweenChecks
	}
	if cfg.MaxTimeBetweenChecks < 0 {
		return inputErr("config.max_time_between_checks", "must be ≥ 0, got %v", cfg.MaxTimeBetweenChecks)
	}
	for _, d := range [...]struct {
		v   *float64
		def float64
	}{{&cfg.CarryOverAnalytePct, DefaultCarryOverAnalytePct}, {&cfg.CarryOverISPct, DefaultCarryOverISPct}} {
		if *d.v == 0 {
			*d.v = d.def
		}
	}
	for name, v := range map[string]float64{"reporting_limit": cfg.ReportingLimit, "lloq": cfg.LLOQ,
		"blank_fraction_of_lloq": cfg.BlankFractionOfLLOQ, "carry_over_analyte_pct": cfg.CarryOverAnalytePct,
		"carry_over_is_pct": cfg.CarryOverISPct, "lloq_response": cfg.LLOQResponse, "is_reference": cfg.ISReference} {
		if !finite(v) || v < 0 {
			return inputErr("config."+name, "must be a finite number ≥ 0, got %v", v)
		}
	}
	if cfg.BlankFractionOfLLOQ > 0 && !(cfg.LLOQ > 0) {
		return inputErr("config.lloq", "a blank limit as a fraction of the LLOQ needs the LLOQ")
	}
	switch cfg.BlankSubtraction {
	case "":
		cfg.BlankSubtraction = SubtractNone
	case SubtractNone, SubtractMeanMethodBlank:
	default:
		return inputErr("config.blank_subtraction", "must be %q or %q, got %q", SubtractNone, SubtractMeanMethodBlank, cfg.BlankSubtraction)
	}
	return nil
}

func validate(inj []Injection) error {
	for i, in := range inj {
		f := "injections[" + in.ID + "]"
		if in.Position < 1 {
			return inputErr(f+".position", "must be ≥ 1, got %d", in.Position)
		}
		if i > 0 && inj[i-1].Position == in.Position {
			return inputErr(f+".position", "position %d is used twice", in.Position)
		}
		switch in.Kind {
		case CalibrationStandard, ICV, CCV, CCB, CalibrationBlank, MethodBlank, Sample, QCSample:
		default:
			return inputErr(f+".kind", "unknown kind %q", in.Kind)
		}
		switch in.Judged {
		case Unjudged, Pass, Fail:
		default:
			return inputErr(f+".judged", "must be pass, fail or empty, got %q", in.Judged)
		}
		for _, v := range [...]float64{in.Nominal, in.Found, in.Result, in.Response, in.ISResponse} {
			if !finite(v) {
				return inputErr(f, "numbers must be finite")
			}
		}
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func isCheck(k Kind) bool { return k == ICV || k == CCV || k == CCB }

func isSample(k Kind) bool { return k == Sample || k == QCSample }

func pct(v float64) string { return strconv.FormatFloat(v, 'f', 1, 64) + " %" }

// evaluator walks the sequence once.
type evaluator struct {
	cfg Config
	ev  *Evaluation

	opening    int    // position of the verification opening the current bracket; 0: none
	openReason string // why no bracket is open, when opening is 0
	pending    []int  // indexes into ev.Samples awaiting a closing check point

	group []CheckResult // the check point being read

	sinceCheck    int       // samples since the last verification (or calibration)
	lastCheckPos  int       // position of that verification; 0: the calibration or the start
	lastCheckTime time.Time // its time
	countBreached bool      // the count rule was already reported for this gap
	calibrating   bool      // reading calibration standards (and their blanks)

	batchNotes []string // noted on every sample at the end
}

func (e *evaluator) step(in Injection) error {
	if !isCheck(in.Kind) {
		e.resolveGroup()
	}
	if in.Kind != CalibrationStandard && in.Kind != CalibrationBlank {
		e.calibrating = false
	}
	switch in.Kind {
	case CalibrationStandard:
		if !e.calibrating {
			e.calibrating = true
			e.withholdPending(fmt.Sprintf("recalibrated at position %d before a verification closed its bracket", in.Position))
			e.openReason = fmt.Sprintf("no passing ICV or CCV since the calibration at position %d", in.Position)
			e.opening = 0
		}
		e.resetGap(0, in.Time)
	case ICV, CCV, CCB:
		c, err := e.judge(in)
		if err != nil {
			return err
		}
		e.ev.Checks = append(e.ev.Checks, c)
		e.group = append(e.group, c)
		if in.Kind != CCB {
			e.checkTime(in)
			e.resetGap(in.Position, in.Time)
		}
	case CalibrationBlank, MethodBlank:
		c, err := e.judge(in)
		if err != nil {
			return err
		}
		e.ev.Checks = append(e.ev.Checks, c)
	case Sample, QCSample:
		s := SampleResult{ID: in.ID, Position: in.Position, Kind: in.Kind, Result: in.Result, Net: in.Result}
		e.sinceCheck++
		if n := e.cfg.MaxSamplesBetweenChecks; n > 0 && e.sinceCheck > n {
			s.Notes = append(s.Notes, fmt.Sprintf("sample %d since the last verification; the method asks for one every %d", e.sinceCheck, n))
			if !e.countBreached {
				e.countBreached = true
				e.ev.Breaches = append(e.ev.Breaches, Breach{Rule: RuleSamplesBetweenChecks, Position: in.Position,
					Detail: fmt.Sprintf("%s at position %d is sample %d since %s; a verification is due every %d samples", in.ID, in.Position, e.sinceCheck, e.since(), n)})
			}
		}
		e.ev.Samples = append(e.ev.Samples, s)
		e.pending = append(e.pending, len(e.ev.Samples)-1)
	}
	return nil
}

func (e *evaluator) since() string {
	if e.lastCheckPos == 0 {
		return "the calibration"
	}
	return fmt.Sprintf("the verification at position %d", e.lastCheckPos)
}

func (e *evaluator) resetGap(pos int, t time.Time) {
	e.sinceCheck, e.lastCheckPos, e.lastCheckTime, e.countBreached = 0, pos, t, false
}

// checkTime reports a verification that came later than the time rule
// allows after the previous verification or the calibration.
func (e *evaluator) checkTime(in Injection) {
	limit := e.cfg.MaxTimeBetweenChecks
	if limit == 0 || in.Time.IsZero() || e.lastCheckTime.IsZero() {
		return
	}
	if gap := in.Time.Sub(e.lastCheckTime); gap > limit {
		e.ev.Breaches = append(e.ev.Breaches, Breach{Rule: RuleTimeBetweenChecks, Position: in.Position,
			Detail: fmt.Sprintf("%s at position %d came %s after %s; the method allows %s", in.ID, in.Position, gap, e.since(), limit)})
	}
}

// judge returns the verdict of a check injection, from Judged or from its
// numbers.
func (e *evaluator) judge(in Injection) (CheckResult, error) {
	c := CheckResult{ID: in.ID, Position: in.Position, Kind: in.Kind}
	if in.Judged != Unjudged {
		c.Passed = in.Judged == Pass
		c.Detail = string(in.Judged) + " (judged before evaluation)"
		if in.Reason != "" {
			c.Detail += ": " + in.Reason
		}
		return c, nil
	}
	f := "injections[" + in.ID + "]"
	switch in.Kind {
	case ICV, CCV:
		if !(in.Nominal > 0) {
			return c, inputErr(f+".nominal", "a verification judged here needs its nominal concentration > 0")
		}
		c.RecoveryPct = 100 * in.Found / in.Nominal
		w := e.cfg.Verification
		c.Passed = c.RecoveryPct >= w.LowPct && c.RecoveryPct <= w.HighPct
		c.Detail = fmt.Sprintf("recovery %s (found %.6g, nominal %g) %s %s", pct(c.RecoveryPct), in.Found, in.Nominal, map[bool]string{true: "within", false: "outside"}[c.Passed], w)
	default:
		limit, basis := e.cfg.ReportingLimit, "the reporting limit"
		if e.cfg.BlankFractionOfLLOQ > 0 {
			limit, basis = e.cfg.BlankFractionOfLLOQ*e.cfg.LLOQ, fmt.Sprintf("%g × LLOQ %g", e.cfg.BlankFractionOfLLOQ, e.cfg.LLOQ)
		}
		if !(limit > 0) {
			return c, inputErr("config.reporting_limit", "judging the blank %s needs a reporting limit or a fraction of the LLOQ", in.ID)
		}
		c.Value, c.Limit = in.Result, limit
		c.Passed = math.Abs(in.Result) <= limit
		c.Detail = fmt.Sprintf("|%.6g| %s %g (%s)", in.Result, map[bool]string{true: "≤", false: ">"}[c.Passed], limit, basis)
		if !c.Passed && in.Kind != CCB {
			e.noteAll(fmt.Sprintf("%s %s at position %d exceeds its limit: %s", strings.ReplaceAll(string(in.Kind), "_", " "), in.ID, in.Position, c.Detail))
		}
	}
	return c, nil
}

// resolveGroup settles the check point just read.
func (e *evaluator) resolveGroup() {
	if len(e.group) == 0 {
		return
	}
	g := e.group
	e.group = nil
	verification := 0
	var failed *CheckResult
	for i := range g {
		if g[i].Kind != CCB && verification == 0 {
			verification = g[i].Position
		}
		if !g[i].Passed && failed == nil {
			failed = &g[i]
		}
	}
	if failed != nil {
		what := fmt.Sprintf("%s %s at position %d failed (%s)", strings.ToUpper(string(failed.Kind)), failed.ID, failed.Position, failed.Detail)
		var reason string
		if e.opening > 0 {
			reason = fmt.Sprintf("%s: every sample since the last passing check at position %d is withheld", what, e.opening)
		} else {
			reason = fmt.Sprintf("%s; and %s", what, e.openReason)
		}
		e.withholdPending(reason)
		e.opening = 0
		e.openReason = "follows " + what + "; no passing verification has opened a new bracket"
		return
	}
	if verification == 0 {
		return // passing CCBs alone close nothing
	}
	for _, k := range e.pending {
		s := &e.ev.Samples[k]
		s.Closing = verification
		if e.opening > 0 {
			s.State, s.Opening = Reportable, e.opening
			s.Reason = fmt.Sprintf("bracketed by passing verifications at positions %d and %d", e.opening, verification)
		} else {
			s.State, s.Reason = Withheld, e.openReason
		}
	}
	e.pending = nil
	e.opening = verification
}

func (e *evaluator) withholdPending(reason string) {
	for _, k := range e.pending {
		s := &e.ev.Samples[k]
		s.State, s.Reason, s.Opening = Withheld, reason, e.opening
	}
	e.pending = nil
}

func (e *evaluator) finish(complete bool, inj []Injection) {
	if complete && !e.cfg.ClosingCheckOptional {
		lastSample, closed := 0, false
		for _, in := range inj {
			switch {
			case isSample(in.Kind):
				lastSample, closed = in.Position, false
			case in.Kind == ICV || in.Kind == CCV:
				closed = true
			}
		}
		if lastSample > 0 && !closed {
			e.ev.Breaches = append(e.ev.Breaches, Breach{Rule: RuleClosingCheckMissing, Position: lastSample,
				Detail: fmt.Sprintf("the sequence ended after the sample at position %d with no closing verification", lastSample)})
		}
	}
	for _, k := range e.pending {
		s := &e.ev.Samples[k]
		s.Opening = e.opening
		switch {
		case e.opening == 0:
			s.State, s.Reason = Withheld, e.openReason
		case complete:
			s.State, s.Reason = Withheld, fmt.Sprintf("the sequence ended without a verification closing the bracket opened at position %d", e.opening)
		default:
			s.State, s.Reason = Provisional, fmt.Sprintf("awaiting the next passing verification to close the bracket opened at position %d", e.opening)
		}
	}
	e.pending = nil
}

func (e *evaluator) noteAll(note string) {
	e.batchNotes = append(e.batchNotes, note)
}
