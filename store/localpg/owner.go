package localpg

import (
	"fmt"
	"log/slog"
	"os"
	"os/user"
	"path/filepath"
	"strconv"
	"syscall"
)

// serverUser is the system account the PostgreSQL programs run as when
// curvekeeper runs as root (initdb and postgres refuse to run as root).
const serverUser = "postgres"

// account is the user the PostgreSQL programs run as. The zero value (root
// is false) means "as ourselves": nothing is switched or chowned.
type account struct {
	root   bool // we are root and switch to uid/gid for the server
	uid    uint32
	gid    uint32
	groups []uint32
}

// serverAccount returns the account to run PostgreSQL as: ourselves, or the
// postgres system user when we are root.
func serverAccount() (account, error) {
	if os.Geteuid() != 0 {
		return account{}, nil
	}
	u, err := user.Lookup(serverUser)
	if err != nil {
		return account{}, fmt.Errorf("localpg: running as root, PostgreSQL must run as the %q system user, which was not found (%v); install the postgresql package, which creates it, or run curvekeeper as an ordinary user", serverUser, err)
	}
	a := account{root: true}
	uid, err1 := strconv.ParseUint(u.Uid, 10, 32)
	gid, err2 := strconv.ParseUint(u.Gid, 10, 32)
	if err1 != nil || err2 != nil {
		return account{}, fmt.Errorf("localpg: user %q has a non-numeric uid %q or gid %q", serverUser, u.Uid, u.Gid)
	}
	a.uid, a.gid = uint32(uid), uint32(gid)
	ids, _ := u.GroupIds()
	for _, s := range ids {
		if g, err := strconv.ParseUint(s, 10, 32); err == nil {
			a.groups = append(a.groups, uint32(g))
		}
	}
	return a, nil
}

// credential is the SysProcAttr.Credential for the PostgreSQL programs.
func (a account) credential() *syscall.Credential {
	if !a.root {
		return nil
	}
	return &syscall.Credential{Uid: a.uid, Gid: a.gid, Groups: a.groups}
}

// own hands path to the server account (a no-op unless we are root).
func (a account) own(path string) error {
	if !a.root {
		return nil
	}
	if err := os.Lchown(path, int(a.uid), int(a.gid)); err != nil {
		return fmt.Errorf("localpg: give %s to user %s: %w", path, serverUser, err)
	}
	return nil
}

// makeTraversable makes sure the server account can reach dir: every folder
// from dir up to / must grant it search (x) permission. A folder that does
// not gets o+x added (search only, not listing), which is logged, because
// folders made by t.TempDir or os.MkdirTemp are 0700 root. A no-op unless
// we are root.
func (a account) makeTraversable(dir string, log *slog.Logger) error {
	if !a.root {
		return nil
	}
	for d := dir; ; d = filepath.Dir(d) {
		fi, err := os.Stat(d)
		if err != nil {
			return fmt.Errorf("localpg: %w", err)
		}
		if !a.canSearch(fi) {
			mode := fi.Mode().Perm() | 0o001
			if err := os.Chmod(d, mode); err != nil {
				return fmt.Errorf("localpg: let user %s reach the data folder: %w", serverUser, err)
			}
			log.Warn("localpg: added search permission for others so the postgres user can reach the data folder",
				"folder", d, "mode", fmt.Sprintf("%04o", mode))
		}
		if d == filepath.Dir(d) {
			return nil
		}
	}
}

func (a account) canSearch(fi os.FileInfo) bool {
	st, ok := fi.Sys().(*syscall.Stat_t)
	if !ok {
		return true
	}
	perm := fi.Mode().Perm()
	switch {
	case st.Uid == a.uid:
		return perm&0o100 != 0
	case a.inGroup(st.Gid):
		return perm&0o010 != 0
	default:
		return perm&0o001 != 0
	}
}

func (a account) inGroup(gid uint32) bool {
	if gid == a.gid {
		return true
	}
	for _, g := range a.groups {
		if g == gid {
			return true
		}
	}
	return false
}
