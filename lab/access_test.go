package lab

import (
	"slices"
	"testing"
)

func TestCheckTokenInput(t *testing.T) {
	for _, c := range []struct {
		name  string
		in    TokenInput
		field string // "" when accepted
	}{
		{"unbound writer", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite}}, "/instruments"},
		{"bound writer", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite}, Instruments: []string{"ic-02"}}, ""},
		{"empty binding", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite}, Instruments: []string{}}, "/instruments"},
		{"control in a name", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite}, Instruments: []string{"ic\u202e02"}}, "/instruments/0"},
		{"dual role without the choice", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite, ScopeCurvesReview}, Instruments: []string{"a"}}, "/allow_dual_role"},
		{"dual role chosen", TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite, ScopeCurvesReview}, Instruments: []string{"a"}, AllowDualRole: true}, ""},
		{"admin unbound", TokenInput{Name: "u", Scopes: []string{ScopeAdmin, ScopeRunsWrite}}, ""},
		{"reviewer unbound", TokenInput{Name: "u", Scopes: []string{ScopeCurvesReview}}, ""},
	} {
		_, err := CheckTokenInput(c.in)
		var got string
		if err != nil {
			e, ok := err.(*Error)
			if !ok || e.Kind != KindInvalid {
				t.Fatalf("%s: %v", c.name, err)
			}
			got = e.Field
		}
		if got != c.field {
			t.Errorf("%s: field %q, want %q (%v)", c.name, got, c.field, err)
		}
	}
	out, _ := CheckTokenInput(TokenInput{Name: "u", Scopes: []string{ScopeRunsWrite}, Instruments: []string{"a", "b", "a"}})
	if !slices.Equal(out.Instruments, []string{"a", "b"}) {
		t.Errorf("instruments %v, want deduplicated [a b]", out.Instruments)
	}
}

func TestMayUse(t *testing.T) {
	bound := Principal{Instruments: []string{"ic-02"}}
	if bound.MayUse("ic-02") != nil || KindOf(bound.MayUse("ic-07")) != KindForbidden {
		t.Error("a bound principal")
	}
	if (Principal{}).MayUse("ic-07") != nil {
		t.Error("an unbound principal is refused")
	}
}

func TestCheckReview(t *testing.T) {
	f := ReviewFacts{CurveID: "c", RunPostedBy: "token:a:1", RevisionBy: "token:q:2"}
	for actor, kind := range map[string]Kind{"token:a:1": KindInvalid, "token:q:2": KindInvalid, "token:r:3": -1} {
		err := CheckReview(f, actor)
		if (kind == -1) != (err == nil) || (err != nil && KindOf(err) != kind) {
			t.Errorf("%s: %v", actor, err)
		}
	}
	// One person behind two tokens, or behind a token and a signature, is
	// one party: the second token or the signature is refused too.
	f.RunPostedByParty, f.RevisionByParty = "person:alba", "person:quinn"
	for _, reviewer := range []string{"person:alba", "person:quinn"} {
		f.ReviewerParty = reviewer
		if KindOf(CheckReview(f, "token:other:9")) != KindInvalid {
			t.Errorf("%s reviews through another token", reviewer)
		}
	}
	f.ReviewerParty = "person:remy"
	if err := CheckReview(f, "person:remy"); err != nil {
		t.Errorf("a third person: %v", err)
	}
	f.AllowSelfReview = true
	if err := CheckReview(f, "token:a:1"); err != nil {
		t.Errorf("self-review allowed by the method: %v", err)
	}
	f.SupersededBy = "rev"
	if KindOf(CheckReview(f, "token:r:3")) != KindConflict {
		t.Error("a superseded curve is reviewed")
	}
}

func TestCheckFreeText(t *testing.T) {
	for r := rune(0x2000); r <= 0x2070; r++ {
		bidi := (r >= 0x202A && r <= 0x202E) || (r >= 0x2066 && r <= 0x2069)
		if err := CheckFreeText("/reason", "a"+string(r)+"b"); (err != nil) != bidi {
			t.Errorf("U+%04X: %v", r, err)
		}
	}
}
