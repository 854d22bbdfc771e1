package store

import (
	"context"
	"errors"
	"fmt"
	"net/url"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
)

// LoginRole is the login role the service connects as on its private
// cluster: LOGIN, a member of AppRole and nothing else, neither superuser
// nor owner of any table. A RESET ROLE on one of its connections gives back
// only its own rights, which are AppRole's. DATABASE_URL deployments choose
// their own login role's name (see GrantApp).
const LoginRole = "curvekeeper_login"

// EnsureLoginRole creates LoginRole on the server of ownerURL when it does
// not exist (roles belong to the whole server) and makes it a member of
// AppRole. ownerURL's user must be allowed to create roles (a superuser, or
// CREATEROLE); the migrations must have run, so that AppRole exists. The
// role gets no password: the private cluster admits local socket users by
// trust. Safe to call concurrently and again.
func EnsureLoginRole(ctx context.Context, ownerURL string) error {
	conn, err := pgx.Connect(ctx, ownerURL)
	if err != nil {
		return fmt.Errorf("store: connect to create the login role: %w", err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	create := `CREATE ROLE ` + pgx.Identifier{LoginRole}.Sanitize() +
		` LOGIN NOSUPERUSER NOCREATEDB NOCREATEROLE NOREPLICATION NOBYPASSRLS INHERIT`
	if _, err := conn.Exec(ctx, create); err != nil {
		var pe *pgconn.PgError
		// 42710 duplicate_object: made earlier, or by a concurrent caller
		// (CREATE ROLE has no IF NOT EXISTS); 23505 when the race reaches
		// pg_authid's unique index first.
		if !errors.As(err, &pe) || (pe.Code != "42710" && pe.Code != "23505") {
			return fmt.Errorf("store: create role %s: %w", LoginRole, err)
		}
	}
	return grantApp(ctx, conn, LoginRole)
}

// GrantApp makes user (the login role of DATABASE_URL) a member of AppRole,
// through ownerURL (DATABASE_MIGRATE_URL), whose user created AppRole in
// the migrations and so may grant it. It does nothing when user already is a
// member.
func GrantApp(ctx context.Context, ownerURL, user string) error {
	conn, err := pgx.Connect(ctx, ownerURL)
	if err != nil {
		return fmt.Errorf("store: connect to grant %s: %w", AppRole, err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	return grantApp(ctx, conn, user)
}

func grantApp(ctx context.Context, conn *pgx.Conn, user string) error {
	var member bool
	err := conn.QueryRow(ctx, `SELECT pg_has_role($1, $2, 'MEMBER')`, user, AppRole).Scan(&member)
	if err != nil {
		return fmt.Errorf("store: is %s a member of %s: %w", user, AppRole, err)
	}
	if member {
		return nil
	}
	grant := `GRANT ` + pgx.Identifier{AppRole}.Sanitize() + ` TO ` + pgx.Identifier{user}.Sanitize()
	if _, err := conn.Exec(ctx, grant); err != nil {
		var pe *pgconn.PgError
		if errors.As(err, &pe) && pe.Code == "23505" { // a concurrent grant won
			return nil
		}
		return fmt.Errorf("store: grant %s to %s: %w", AppRole, user, err)
	}
	return nil
}

// WithUser returns connString with its user replaced by user and any
// password dropped, in the form it came in (URL or keyword/value).
func WithUser(connString, user string) (string, error) {
	if strings.HasPrefix(connString, "postgres://") || strings.HasPrefix(connString, "postgresql://") {
		u, err := url.Parse(connString)
		if err != nil {
			return "", fmt.Errorf("store: parse database url: %w", err)
		}
		u.User = url.User(user)
		q := u.Query()
		if q.Has("password") || q.Has("user") {
			q.Del("password")
			q.Del("user")
			u.RawQuery = q.Encode()
		}
		return u.String(), nil
	}
	if _, err := pgconn.ParseConfig(connString); err != nil {
		return "", fmt.Errorf("store: parse database connection string: %w", err)
	}
	// keyword/value: a later keyword overrides an earlier one; an empty
	// password makes libpq-style clients ask the server without one.
	quote := strings.NewReplacer(`\`, `\\`, `'`, `\'`).Replace
	return connString + " user='" + quote(user) + "' password=''", nil
}

// UserOf returns the user a connection string logs in as (libpq's default,
// the OS user, when it names none).
func UserOf(connString string) (string, error) {
	cfg, err := pgconn.ParseConfig(connString)
	if err != nil {
		return "", fmt.Errorf("store: parse database connection string: %w", err)
	}
	return cfg.User, nil
}

// Privilege is what the service's own login may do beyond AppRole's rights.
type Privilege struct {
	User      string // session_user
	Superuser bool   // rolsuper: bypasses every privilege and trigger
	Owner     bool   // owns a table of the schema, or may SET ROLE to its owner
}

// Risky reports whether an injected RESET ROLE or SET ROLE would give the
// service's connections more than AppRole's rights.
func (p Privilege) Risky() bool { return p.Superuser || p.Owner }

// sqlLoginPrivilege reads what session_user (the login, not the SET ROLE)
// may do: superuser, or member of the role owning any table in public.
const sqlLoginPrivilege = `
SELECT session_user::text,
       (SELECT rolsuper FROM pg_roles WHERE rolname = session_user),
       EXISTS (SELECT 1 FROM pg_tables t
               WHERE t.schemaname = 'public'
                 AND pg_has_role(session_user, t.tableowner, 'MEMBER'))`

// LoginPrivilege reports the privileges of the login user of db's
// connections, whatever role they switched to.
func (db *DB) LoginPrivilege(ctx context.Context) (Privilege, error) {
	var p Privilege
	err := db.Pool.QueryRow(ctx, sqlLoginPrivilege).Scan(&p.User, &p.Superuser, &p.Owner)
	if err != nil {
		return p, fmt.Errorf("store: read the login's privileges: %w", err)
	}
	return p, nil
}
