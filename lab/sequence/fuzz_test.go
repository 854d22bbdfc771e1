package sequence

import (
	"testing"
	"time"
)

// FuzzEvaluate builds a sequence from bytes (each byte one injection: its
// kind and, for checks, pass or fail) and checks the bracketing invariants:
// every sample has a state and a reason; a reportable sample lies strictly
// between its opening and closing verifications, both of which passed; a
// provisional one only in a running sequence.
func FuzzEvaluate(f *testing.F) {
	f.Add([]byte{0, 0, 2, 6, 6, 3, 6, 6, 13, 4, 6, 3}, true)
	f.Add([]byte{2, 6, 6, 6, 6, 3, 7, 9, 6, 3, 6}, false)
	kinds := []Kind{CalibrationStandard, CalibrationBlank, ICV, CCV, CCB, MethodBlank, Sample, QCSample}
	f.Fuzz(func(t *testing.T, b []byte, complete bool) {
		if len(b) > 200 {
			return
		}
		in := make([]Injection, len(b))
		for i, x := range b {
			k := kinds[int(x)%len(kinds)]
			in[i] = Injection{ID: string(k), Kind: k, Position: i + 1, Time: t0.Add(time.Duration(i) * time.Minute),
				Nominal: 1 + float64(i%3), Response: float64(x), ISResponse: 100, Result: float64(x%5) / 10}
			if isCheck(k) || k == MethodBlank || k == CalibrationBlank {
				in[i].Judged = Pass
				if x >= 8*8 && x < 8*9 {
					in[i].Judged = Fail
				}
			}
		}
		ev, err := Evaluate(Sequence{Injections: in, Complete: complete}, Config{MaxTimeBetweenChecks: time.Hour})
		if err != nil {
			t.Fatal(err)
		}
		passed := map[int]bool{}
		for _, c := range ev.Checks {
			passed[c.Position] = c.Passed
		}
		for _, s := range ev.Samples {
			if s.Reason == "" {
				t.Fatalf("%+v: no reason", s)
			}
			switch s.State {
			case Reportable:
				if !(s.Opening < s.Position && s.Position < s.Closing) || !passed[s.Opening] || !passed[s.Closing] {
					t.Fatalf("reportable %+v not bracketed by passing checks", s)
				}
				for p := s.Opening + 1; p < s.Closing; p++ {
					if c, ok := passed[p]; ok && !c && in[p-1].Kind != MethodBlank && in[p-1].Kind != CalibrationBlank {
						t.Fatalf("reportable %+v with a failed check at %d inside its bracket", s, p)
					}
				}
			case Provisional:
				if complete {
					t.Fatalf("provisional %+v in a complete sequence", s)
				}
			case Withheld:
			default:
				t.Fatalf("%+v: state %q", s, s.State)
			}
		}
	})
}
