// Package ucum validates, parses and converts the unit codes analytical
// laboratories report in, written in UCUM, the Unified Code for Units of
// Measure (Regenstrief Institute, unitsofmeasure.org; version 2.1 of 2017,
// from memory: the atoms, prefixes and factors below are recalled from the
// specification's tables and should be confirmed against them).
//
// It is a subset of UCUM's case-sensitive ("c/s") grammar, large enough for
// concentrations, mass fractions, ratios, counts, absorbance, volumes, masses
// and times:
//
//	unit      = ["/"] term { ("." | "/") term }      evaluated left to right
//	term      = component [annotation] | annotation | "1"
//	component = [prefix] atom [exponent]             prefix only on metric atoms
//	exponent  = ["+" | "-"] digits
//
// Atoms: g, L (and l), m, s, mol (metric, take prefixes); min, h, d, %,
// [ppth], [ppm], [ppb], [pptr] (no prefix). Prefixes: Y Z E P T G M k h da d
// c m u n p f a z y. Annotations {…} mean 1, as in UCUM, so {cps} is a
// dimensionless count rate as written and {counts}/s is per second. Codes are
// case-sensitive as UCUM's c/s form is: mg/L is valid, MG/L is not (in full
// UCUM, MG would be the megagauss; the gauss is outside this subset, so
// MG/L is refused with a hint, while Mg/L, the megagram per litre, is
// accepted as the valid code it is).
// Parentheses and numeric factors such as 10*3 are outside this subset and
// are refused with an error that says so.
//
// One deliberate departure from UCUM: amount of substance (mol) is kept as
// its own dimension, so that moles and grams never convert silently; mol↔g
// conversion needs a molar mass given explicitly (ConvertMolar). And units
// whose annotations differ ({cps} and {absorbance}) are not converted into
// each other, although UCUM reads both as 1.
package ucum

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// Source names the specification this package follows.
const Source = "UCUM, The Unified Code for Units of Measure, Regenstrief Institute, unitsofmeasure.org, version 2.1 (2017), from memory: a case-sensitive subset"

// dimension indexes: length, mass, time, amount of substance.
const (
	dimL = iota
	dimM
	dimT
	dimN
	nDims
)

type dims [nDims]int

// Unit is a parsed unit code: its factor to the base units (m, g, s, mol)
// and its dimension.
type Unit struct {
	Code        string
	Factor      float64 // the unit in base units: 1 mg/L = 1e-3 g / 1e-3 m³ = 1 g·m⁻³
	dim         dims
	annotations string // the annotations, sorted and joined, for compatibility
}

// Dimension returns the unit's dimension as a readable product, e.g.
// "M·L-3" for mg/L or "1" for a ratio.
func (u Unit) Dimension() string {
	names := [nDims]string{"L", "M", "T", "N"}
	var parts []string
	for i, e := range u.dim {
		switch {
		case e == 1:
			parts = append(parts, names[i])
		case e != 0:
			parts = append(parts, fmt.Sprintf("%s%d", names[i], e))
		}
	}
	if len(parts) == 0 {
		return "1"
	}
	return strings.Join(parts, "·")
}

// Error reports a unit code that cannot be used, or two units that cannot be
// converted into each other.
type Error struct {
	Code   string
	Reason string
}

func (e *Error) Error() string {
	return fmt.Sprintf("ucum: %q: %s", e.Code, e.Reason)
}

// Accepted describes, in words, what Parse accepts; every parse error
// carries it.
const Accepted = "accepted are products (.) and quotients (/) of g, L (or l), m, s, mol with the metric prefixes Y Z E P T G M k h da d c m u n p f a z y, and of min, h, d, %, [ppth], [ppm], [ppb], [pptr], 1, with integer exponents (m3, s-1) and {annotations}; codes are case-sensitive (mg/L, not MG/L)"

type atom struct {
	factor float64
	dim    dims
	metric bool
}

// atoms are the unit atoms of the subset with their value in base units
// (UCUM 2.1 tables, from memory). l and L are both the litre in UCUM's c/s
// form.
var atoms = map[string]atom{
	"g":   {1, dims{dimM: 1}, true},
	"m":   {1, dims{dimL: 1}, true},
	"s":   {1, dims{dimT: 1}, true},
	"mol": {1, dims{dimN: 1}, true},
	"L":   {1e-3, dims{dimL: 3}, true},
	"l":   {1e-3, dims{dimL: 3}, true},
	"min": {60, dims{dimT: 1}, false},
	"h":   {3600, dims{dimT: 1}, false},
	"d":   {86400, dims{dimT: 1}, false},
	"%":   {1e-2, dims{}, false},

	"[ppth]": {1e-3, dims{}, false},
	"[ppm]":  {1e-6, dims{}, false},
	"[ppb]":  {1e-9, dims{}, false},
	"[pptr]": {1e-12, dims{}, false},
}

// prefixes are UCUM's decimal prefixes (c/s codes). "da" is the only
// two-character one.
var prefixes = map[string]float64{
	"Y": 1e24, "Z": 1e21, "E": 1e18, "P": 1e15, "T": 1e12, "G": 1e9, "M": 1e6,
	"k": 1e3, "h": 1e2, "da": 1e1, "d": 1e-1, "c": 1e-2, "m": 1e-3, "u": 1e-6,
	"n": 1e-9, "p": 1e-12, "f": 1e-15, "a": 1e-18, "z": 1e-21, "y": 1e-24,
}

// Validate reports whether code is a unit of the subset, exactly as written.
func Validate(code string) error {
	_, err := Parse(code)
	return err
}

// Parse reads a unit code. Unknown atoms, wrong case, misplaced operators,
// parentheses and numeric factors give a *Error that says what is accepted.
func Parse(code string) (Unit, error) {
	u, err := parse(code)
	if err == nil {
		return u, nil
	}
	reason := err.Error()
	if hint := caseHint(code); hint != "" {
		reason += fmt.Sprintf("; did you mean %q? UCUM codes are case-sensitive", hint)
	}
	if code == "AU" {
		reason += "; in UCUM AU is the astronomic unit: write absorbance as {absorbance} or {AU}"
	}
	return Unit{}, &Error{Code: code, Reason: reason + "; " + Accepted}
}

// caseHint returns a valid code that differs from code only in letter case,
// trying all lower case with an upper-case litre, then all lower case.
func caseHint(code string) string {
	lower := strings.ToLower(code)
	for _, c := range []string{strings.ReplaceAll(strings.ReplaceAll(lower, "l", "L"), "moL", "mol"), lower} {
		if c != code {
			if _, err := parse(c); err == nil {
				return c
			}
		}
	}
	return ""
}

func parse(code string) (Unit, error) {
	if code == "" {
		return Unit{}, fmt.Errorf("empty unit code (write 1 for a pure number)")
	}
	u := Unit{Code: code, Factor: 1}
	var annots []string
	rest := code
	op := byte('.')
	if rest[0] == '/' {
		op, rest = '/', rest[1:]
	}
	for {
		term, next, nextOp, err := splitTerm(rest)
		if err != nil {
			return Unit{}, err
		}
		f, d, a, err := parseTerm(term)
		if err != nil {
			return Unit{}, err
		}
		annots = append(annots, a...)
		sign := 1
		if op == '/' {
			sign = -1
		}
		u.Factor *= math.Pow(f, float64(sign))
		for i := range u.dim {
			u.dim[i] += sign * d[i]
		}
		if nextOp == 0 {
			break
		}
		op, rest = nextOp, next
	}
	if !(u.Factor > 0) || math.IsInf(u.Factor, 0) || u.Factor < 1e-300 {
		return Unit{}, fmt.Errorf("the unit's size overflows a float64")
	}
	sort.Strings(annots)
	u.annotations = strings.Join(annots, "")
	return u, nil
}

// splitTerm cuts the first term off s at the first "." or "/" outside
// brackets and braces.
func splitTerm(s string) (term, rest string, op byte, err error) {
	depth := byte(0)
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case depth != 0:
			if c == depth {
				depth = 0
			}
		case c == '{':
			depth = '}'
		case c == '[':
			depth = ']'
		case c == '(' || c == ')':
			return "", "", 0, fmt.Errorf("parentheses are outside the supported subset")
		case c == '.' || c == '/':
			if i == 0 {
				return "", "", 0, fmt.Errorf("an operator %q without a unit before it", c)
			}
			if i == len(s)-1 {
				return "", "", 0, fmt.Errorf("an operator %q without a unit after it", c)
			}
			return s[:i], s[i+1:], c, nil
		}
	}
	if depth != 0 {
		return "", "", 0, fmt.Errorf("an unclosed %q", map[byte]string{'}': "{", ']': "["}[depth])
	}
	if s == "" {
		return "", "", 0, fmt.Errorf("an operator without a unit after it")
	}
	return s, "", 0, nil
}

// parseTerm reads one term: an annotation alone, "1", or a component with
// an optional annotation after it.
func parseTerm(t string) (float64, dims, []string, error) {
	var annots []string
	if i := strings.IndexByte(t, '{'); i >= 0 {
		if !strings.HasSuffix(t, "}") || strings.Count(t, "{") != 1 {
			return 0, dims{}, nil, fmt.Errorf("an annotation must close a term: %q", t)
		}
		a := t[i+1 : len(t)-1]
		for _, c := range a {
			if c < 33 || c > 126 {
				return 0, dims{}, nil, fmt.Errorf("annotation %q holds a character outside ASCII 33–126", a)
			}
		}
		annots = append(annots, "{"+a+"}")
		t = t[:i]
		if t == "" {
			return 1, dims{}, annots, nil
		}
	}
	if t == "1" {
		return 1, dims{}, annots, nil
	}
	body, exp, err := splitExponent(t)
	if err != nil {
		return 0, dims{}, nil, err
	}
	f, d, err := parseComponent(body)
	if err != nil {
		return 0, dims{}, nil, err
	}
	for i := range d {
		d[i] *= exp
	}
	return math.Pow(f, float64(exp)), d, annots, nil
}

// splitExponent separates a trailing signed integer exponent ("m3", "s-1").
func splitExponent(t string) (string, int, error) {
	i := len(t)
	for i > 0 && t[i-1] >= '0' && t[i-1] <= '9' {
		i--
	}
	if i == len(t) {
		return t, 1, nil
	}
	digits := t[i:]
	sign := 1
	if i > 0 && (t[i-1] == '-' || t[i-1] == '+') {
		if t[i-1] == '-' {
			sign = -1
		}
		i--
	}
	body := t[:i]
	if body == "" || strings.ContainsAny(body, "*^") {
		return "", 0, fmt.Errorf("numeric factors such as 10*3 are outside the supported subset: %q", t)
	}
	e := 0
	for _, c := range digits {
		e = e*10 + int(c-'0')
		if e > 9 {
			return "", 0, fmt.Errorf("exponent of %q is too large", t)
		}
	}
	if e == 0 {
		return "", 0, fmt.Errorf("exponent 0 in %q", t)
	}
	return body, sign * e, nil
}

// parseComponent reads an atom with an optional prefix. A whole atom wins
// over a prefix reading ("min" is the minute, "m" the metre, "d" the day).
func parseComponent(c string) (float64, dims, error) {
	if a, ok := atoms[c]; ok {
		return a.factor, a.dim, nil
	}
	for _, n := range []int{2, 1} {
		if len(c) <= n {
			continue
		}
		p, ok := prefixes[c[:n]]
		if !ok {
			continue
		}
		a, ok := atoms[c[n:]]
		if !ok {
			continue
		}
		if !a.metric {
			return 0, dims{}, fmt.Errorf("%q takes no prefix (only g, L, l, m, s and mol do)", c[n:])
		}
		return p * a.factor, a.dim, nil
	}
	return 0, dims{}, fmt.Errorf("unknown unit %q", c)
}
