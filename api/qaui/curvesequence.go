package qaui

import (
	"encoding/json"
	"sort"
	"strconv"
	"strings"
	"time"

	"curvekeeper/lab"
)

// sequenceView is the run's sequence as the curve's analyte saw it: every
// injection in acquisition order, each sample with its bracket (the
// verification before and after it and its verdict), the carry-over check
// and the blank subtraction.
type sequenceView struct {
	Rows      []sequenceRow
	Breaches  []lab.SequenceBreach
	CarryOver *lab.CarryOverRecord
	Blank     *lab.BlankRecord
	Complete  bool
}

// sequenceRow is one injection.
type sequenceRow struct {
	Position int
	Time     string
	Kind     string // in words
	ID       string
	Verdict  string // pass, fail, reportable, provisional, withheld; "" for a calibration standard
	Bad      bool
	Before   string // a sample's opening verification and its verdict
	After    string // its closing one
	Detail   string
}

var kindWords = map[string]string{"calibration_standard": "calibration standard", "icv": "ICV", "ccv": "CCV", "ccb": "CCB",
	"calibration_blank": "calibration blank", "method_blank": "method blank", "sample": "sample", "qc_sample": "QC sample"}

// sequenceOf builds the view from the run's posted sequence and the
// sequence records of the curve's results; nil when the run has none or no
// result of this curve carries a record.
func sequenceOf(seq *lab.RunSequence, analyte string, results []lab.Result) *sequenceView {
	if seq == nil {
		return nil
	}
	recs := map[string]lab.SequenceRecord{}
	var first lab.SequenceRecord
	for _, r := range results {
		var rec lab.SequenceRecord
		if len(r.Sequence) == 0 || json.Unmarshal(r.Sequence, &rec) != nil {
			continue
		}
		recs[r.SampleID], first = rec, rec
	}
	if len(recs) == 0 {
		return nil
	}
	checks := map[int]lab.SequenceCheck{}
	for _, c := range first.Checks {
		checks[c.Position] = c
	}
	v := &sequenceView{Breaches: first.Breaches, CarryOver: first.CarryOver, Blank: first.Blank, Complete: seq.Complete}
	bracketEnd := func(pos int, none string) string {
		if pos == 0 {
			return none
		}
		c, ok := checks[pos]
		if !ok {
			return "position " + strconv.Itoa(pos)
		}
		name := kindWords[c.Kind] + " " + c.ID
		if strings.EqualFold(kindWords[c.Kind], c.ID) {
			name = c.ID
		}
		return name + " at " + strconv.Itoa(pos) + ": " + map[bool]string{true: "passed", false: "failed"}[c.Passed]
	}
	injections := append([]lab.RunInjection(nil), seq.Injections...)
	sort.SliceStable(injections, func(i, j int) bool { return injections[i].Position < injections[j].Position })
	for _, in := range injections {
		row := sequenceRow{Position: in.Position, Kind: kindWords[in.Kind], ID: in.ID}
		if strings.EqualFold(row.Kind, row.ID) {
			row.Kind = "" // "ICV ICV" says it twice
		}
		if in.Time != nil {
			row.Time = in.Time.UTC().Format(time.TimeOnly)
		}
		switch in.Kind {
		case "sample", "qc_sample":
			rec, ok := recs[in.ID]
			if !ok {
				continue // a sample of another analyte
			}
			row.Verdict, row.Bad, row.Detail = rec.State, rec.State == "withheld", rec.Reason
			row.Before = bracketEnd(rec.Opening, "none: no passing verification opened it")
			closing := rec.Closing
			if closing == 0 { // withheld or still open: the first check after it, if any
				closing = nextCheck(first.Checks, in.Position)
			}
			row.After = bracketEnd(closing, map[bool]string{true: "none: the sequence ended", false: "not yet"}[seq.Complete])
		case "calibration_standard":
		default:
			if in.Analyte != "" && in.Analyte != analyte {
				continue
			}
			if c, ok := checks[in.Position]; ok {
				row.Verdict = map[bool]string{true: "pass", false: "fail"}[c.Passed]
				row.Bad, row.Detail = !c.Passed, c.Detail
			}
		}
		row.Detail = strings.TrimSpace(row.Detail)
		v.Rows = append(v.Rows, row)
	}
	return v
}

// nextCheck returns the position of the first ICV, CCV or CCB after pos, 0
// when there is none.
func nextCheck(checks []lab.SequenceCheck, pos int) int {
	next := 0
	for _, c := range checks {
		if (c.Kind == "icv" || c.Kind == "ccv" || c.Kind == "ccb") && c.Position > pos && (next == 0 || c.Position < next) {
			next = c.Position
		}
	}
	return next
}
