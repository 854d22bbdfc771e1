// Package archtest checks the shape of the house: which package may import
// what (DEVELOPERS.md, "Layout"). It reads `go list -json -deps`, so a new
// import that breaks a rule fails here, in `go test ./...`.
package archtest

import (
	"bytes"
	"encoding/json"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// pkg is the part of `go list -json` the rules need.
type pkg struct {
	ImportPath string
	Dir        string
	GoFiles    []string
	Standard   bool
	Imports    []string
	Deps       []string
}

// list returns every package matched by patterns, with its imports and
// transitive dependencies (tests excluded: test files may use anything).
func list(t *testing.T, patterns ...string) []pkg {
	t.Helper()
	cmd := exec.Command("go", append([]string{"list", "-json=ImportPath,Dir,GoFiles,Standard,Imports,Deps"}, patterns...)...)
	cmd.Dir = "../.."
	var out, stderr bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &stderr
	if err := cmd.Run(); err != nil {
		t.Fatalf("go list %v: %v\n%s", patterns, err, stderr.String())
	}
	var pkgs []pkg
	dec := json.NewDecoder(&out)
	for {
		var p pkg
		if err := dec.Decode(&p); err == io.EOF {
			break
		} else if err != nil {
			t.Fatalf("decode go list: %v", err)
		}
		pkgs = append(pkgs, p)
		// Read each source file, so that the test cache, which records the
		// files a test opens, runs the test again when one changes.
		for _, f := range p.GoFiles {
			if _, err := os.ReadFile(filepath.Join(p.Dir, f)); err != nil {
				t.Fatal(err)
			}
		}
	}
	if len(pkgs) == 0 {
		t.Fatalf("go list %v matched nothing", patterns)
	}
	return pkgs
}

// standard reports whether path is in the standard library (no dot in its
// first element).
func standard(path string) bool {
	first, _, _ := strings.Cut(path, "/")
	return !strings.Contains(first, ".")
}

func hasPrefix(path string, prefixes []string) bool {
	for _, p := range prefixes {
		if path == p || strings.HasPrefix(path, p+"/") {
			return true
		}
	}
	return false
}

var (
	sqlPackages  = []string{"github.com/jackc/pgx", "github.com/jackc/pgx/v5", "github.com/golang-migrate/migrate/v4", "database/sql", "curvekeeper/store"}
	httpPackages = []string{"net/http", "github.com/labstack/echo/v4", "github.com/getkin/kin-openapi", "curvekeeper/api"}
)

func TestAPIImportsNoSQL(t *testing.T) {
	for _, p := range list(t, "curvekeeper/api/...") {
		for _, imp := range p.Imports {
			if hasPrefix(imp, sqlPackages) {
				t.Errorf("%s imports %s: api holds HTTP only; SQL belongs in store", p.ImportPath, imp)
			}
		}
		for _, dep := range p.Deps {
			// database/sql arrives through Prometheus' collectors and uuid;
			// pgx and the store must not arrive at all.
			if hasPrefix(dep, []string{"github.com/jackc/pgx/v5", "curvekeeper/store"}) {
				t.Errorf("%s depends on %s: api must reach the database through lab only", p.ImportPath, dep)
			}
		}
	}
}

func TestLabImportsNeitherHTTPNorSQL(t *testing.T) {
	for _, p := range list(t, "curvekeeper/lab/...") {
		for _, dep := range p.Deps {
			if hasPrefix(dep, sqlPackages) || hasPrefix(dep, httpPackages) {
				t.Errorf("%s depends on %s: the lab's rules import calib, never HTTP or SQL", p.ImportPath, dep)
			}
		}
		for _, imp := range p.Imports {
			if !standard(imp) && !hasPrefix(imp, []string{"curvekeeper/calib", "curvekeeper/lab/"}) {
				t.Errorf("%s imports %s: lab imports the standard library, calib and its own packages only", p.ImportPath, imp)
			}
		}
	}
}

func TestCalibImportsOnlyStdAndGonum(t *testing.T) {
	for _, p := range list(t, "curvekeeper/calib/...") {
		for _, dep := range p.Deps {
			if !standard(dep) && !hasPrefix(dep, []string{"gonum.org/v1/gonum"}) {
				t.Errorf("%s depends on %s: calib imports the standard library and gonum only", p.ImportPath, dep)
			}
		}
	}
}

func TestStoreImportsNoHTTP(t *testing.T) {
	for _, p := range list(t, "curvekeeper/store") {
		for _, dep := range p.Deps {
			if hasPrefix(dep, httpPackages) {
				t.Errorf("%s depends on %s: store holds SQL only", p.ImportPath, dep)
			}
		}
	}
}
