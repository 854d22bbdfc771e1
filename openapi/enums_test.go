package openapi

import (
	"go/ast"
	"go/parser"
	"go/token"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

// codeConstants returns the string constants declared at package level in
// the non-test Go files of dirs (relative to this package), by name.
func codeConstants(t *testing.T, dirs ...string) map[string]string {
	t.Helper()
	out := map[string]string{}
	for _, dir := range dirs {
		files, err := filepath.Glob(filepath.Join("..", dir, "*.go"))
		if err != nil || len(files) == 0 {
			t.Fatalf("no Go files in %s: %v", dir, err)
		}
		for _, f := range files {
			if strings.HasSuffix(f, "_test.go") {
				continue
			}
			file, err := parser.ParseFile(token.NewFileSet(), f, nil, parser.SkipObjectResolution)
			if err != nil {
				t.Fatal(err)
			}
			for _, d := range file.Decls {
				g, ok := d.(*ast.GenDecl)
				if !ok || g.Tok != token.CONST {
					continue
				}
				for _, spec := range g.Specs {
					vs := spec.(*ast.ValueSpec)
					for i, name := range vs.Names {
						if i >= len(vs.Values) {
							continue
						}
						lit, ok := vs.Values[i].(*ast.BasicLit)
						if !ok || lit.Kind != token.STRING {
							continue
						}
						v, err := strconv.Unquote(lit.Value)
						if err != nil {
							t.Fatal(err)
						}
						out[dir+"."+name.Name] = v
					}
				}
			}
		}
	}
	return out
}

// valuesWithPrefix returns the sorted, distinct values of the constants whose
// qualified names (dir.Name) start with one of prefixes.
func valuesWithPrefix(consts map[string]string, prefixes ...string) []string {
	var out []string
	for name, v := range consts {
		for _, p := range prefixes {
			if strings.HasPrefix(name, p) && !slices.Contains(out, v) {
				out = append(out, v)
			}
		}
	}
	slices.Sort(out)
	return out
}

// TestEnumsCoverCode: every flag, cause and check name the code can emit is
// a value of its spec enum, found by reading the constants of calib and lab
// (so a new constant fails this test until the spec lists it). Flags and
// causes must match exactly both ways; the spec's check names also include
// ones the code declares under other prefixes, so for checks the code's
// values must be in the enum.
func TestEnumsCoverCode(t *testing.T) {
	doc := load(t)
	consts := codeConstants(t, "calib", "lab")
	enum := func(name string) []string {
		s := doc.Components.Schemas[name]
		if s == nil {
			t.Fatalf("no schema %s", name)
		}
		var out []string
		for _, v := range s.Value.Enum {
			out = append(out, v.(string))
		}
		slices.Sort(out)
		return out
	}
	tests := []struct {
		schema   string
		prefixes []string
		exact    bool
	}{
		{"PredictionFlag", []string{"calib.Flag"}, true},
		{"ResultFlag", []string{"calib.Flag", "lab.Flag"}, true},
		{"FitFlag", []string{"calib.FitFlag"}, true},
		{"ResultEventCause", []string{"lab.Cause"}, true},
		{"CheckName", []string{"calib.Check", "lab.Check"}, false},
	}
	for _, tc := range tests {
		code, spec := valuesWithPrefix(consts, tc.prefixes...), enum(tc.schema)
		if len(code) == 0 {
			t.Errorf("%s: no constants %v in the code; the reading is wrong", tc.schema, tc.prefixes)
		}
		for _, v := range code {
			if !slices.Contains(spec, v) {
				t.Errorf("%s: the code emits %q, the spec's enum %v lacks it", tc.schema, v, spec)
			}
		}
		if tc.exact {
			for _, v := range spec {
				if !slices.Contains(code, v) {
					t.Errorf("%s: the spec lists %q, no constant %v declares it", tc.schema, v, tc.prefixes)
				}
			}
		}
	}
}
