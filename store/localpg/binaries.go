package localpg

import (
	"bytes"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"sort"
	"strconv"
	"strings"
)

// ErrNoBinaries is matched (errors.Is) by the error Start returns when no
// PostgreSQL server programs can be found.
var ErrNoBinaries = errors.New("no PostgreSQL server programs (initdb and postgres) were found")

// debianBinGlob is where Debian and Ubuntu install one folder per major
// version; those folders are not on PATH.
const debianBinGlob = "/usr/lib/postgresql/*/bin"

// binaries names the programs of one PostgreSQL installation.
type binaries struct {
	dir      string
	initdb   string
	postgres string
}

// tool returns the path of another program of the same installation
// (pg_basebackup, pg_ctl), which Start does not need and so does not check:
// the one beside postgres, else the one beside the file postgres links to
// (a folder on PATH may hold links to a few programs only).
func (b binaries) tool(name string) string {
	p := filepath.Join(b.dir, name)
	if executable(p) {
		return p
	}
	if real, err := filepath.EvalSymlinks(b.postgres); err == nil {
		if q := filepath.Join(filepath.Dir(real), name); executable(q) {
			return q
		}
	}
	return p
}

// searchDirs lists the folders to search, in order: override when non-nil,
// otherwise PATH and then /usr/lib/postgresql/*/bin, newest version first.
func searchDirs(override []string) []string {
	if override != nil {
		return override
	}
	dirs := filepath.SplitList(os.Getenv("PATH"))
	matches, _ := filepath.Glob(debianBinGlob)
	sort.SliceStable(matches, func(i, j int) bool {
		return versionOfDir(matches[i]) > versionOfDir(matches[j])
	})
	return append(dirs, matches...)
}

// versionOfDir returns N of /usr/lib/postgresql/N/bin as a number for a
// numeric sort (so 10 sorts above 9), or -1.
func versionOfDir(dir string) float64 {
	v, err := strconv.ParseFloat(filepath.Base(filepath.Dir(dir)), 64)
	if err != nil {
		return -1
	}
	return v
}

// findBinaries returns the first folder of dirs holding both initdb and
// postgres. When wantMajor is not empty (the PG_VERSION of an existing
// cluster) the installation must also be of that major version, since a
// server refuses a data folder made by another major version.
func findBinaries(dirs []string, wantMajor string) (binaries, error) {
	seen := map[string]bool{}
	var other []string // installations of the wrong major version
	for _, dir := range dirs {
		if dir == "" || seen[dir] {
			continue
		}
		seen[dir] = true
		b := binaries{dir: dir, initdb: filepath.Join(dir, "initdb"), postgres: filepath.Join(dir, "postgres")}
		if !executable(b.initdb) || !executable(b.postgres) {
			continue
		}
		if wantMajor == "" {
			return b, nil
		}
		major, err := serverMajor(b.postgres)
		if err != nil {
			return binaries{}, err
		}
		if major == wantMajor {
			return b, nil
		}
		other = append(other, fmt.Sprintf("%s (version %s)", dir, major))
	}
	if wantMajor != "" && len(other) > 0 {
		return binaries{}, fmt.Errorf("localpg: the data folder was made by PostgreSQL %s but only other versions were found: %s; install PostgreSQL %s (Debian: `apt-get install postgresql-%s`) or use another data folder",
			wantMajor, strings.Join(other, ", "), wantMajor, wantMajor)
	}
	where := "on PATH or in " + debianBinGlob
	if len(dirs) == 0 || !sameStrings(dirs, searchDirs(nil)) {
		where = "in " + strings.Join(dirs, ", ")
	}
	return binaries{}, fmt.Errorf("localpg: %w %s, so curvekeeper cannot run its private database. "+
		"Install PostgreSQL (on Debian or Ubuntu: `apt-get install postgresql`; the programs land in %s, which is searched), "+
		"or leave the private database aside and point curvekeeper at an existing server by setting DATABASE_URL "+
		"(or --database-url), for example DATABASE_URL=postgres://curvekeeper@db.example.org:5432/curvekeeper",
		ErrNoBinaries, where, debianBinGlob)
}

func sameStrings(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func executable(path string) bool {
	fi, err := os.Stat(path)
	return err == nil && fi.Mode().IsRegular() && fi.Mode().Perm()&0o111 != 0
}

var versionRE = regexp.MustCompile(`\(PostgreSQL\) (\d+)(?:\.(\d+))?`)

// serverMajor runs `postgres -V` and returns the major version ("15"; "9.6"
// for the old two-part numbers).
func serverMajor(postgres string) (string, error) {
	out, err := exec.Command(postgres, "-V").Output()
	if err != nil {
		return "", fmt.Errorf("localpg: run %s -V: %w", postgres, err)
	}
	m := versionRE.FindSubmatch(out)
	if m == nil {
		return "", fmt.Errorf("localpg: cannot read the version in %q from %s -V", bytes.TrimSpace(out), postgres)
	}
	major := string(m[1])
	if n, _ := strconv.Atoi(major); n < 10 && len(m[2]) > 0 {
		major += "." + string(m[2])
	}
	return major, nil
}
