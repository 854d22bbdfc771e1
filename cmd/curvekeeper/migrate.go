package main

import (
	"context"
	"fmt"
	"io"
	"strconv"

	"curvekeeper/store"
)

// migrateCmd runs "curvekeeper migrate up|down [N]|force V|version". force
// marks the schema as being at version V and clean, after an operator has
// repaired a failed migration by hand.
func migrateCmd(ctx context.Context, args []string, getenv func(string) string, stdout, stderr io.Writer) error {
	if len(args) == 0 {
		return &usageError{"migrate needs up, down [N], force V or version"}
	}
	verb := args[0]
	cfg, rest, err := parseConfig("migrate "+verb, args[1:], getenv, stderr)
	if err != nil {
		return helpOK(err)
	}
	log := newLogger(cfg, stderr)
	dbase, err := openDatabase(ctx, cfg, log)
	if err != nil {
		return err
	}
	defer dbase.close(log)
	switch verb {
	case "up":
		if err := store.MigrateUp(ctx, dbase.ownerURL, cfg.MigrateLockWait); err != nil {
			return err
		}
	case "down":
		steps := 1
		if len(rest) > 0 {
			if steps, err = strconv.Atoi(rest[0]); err != nil || steps < 1 {
				return &usageError{fmt.Sprintf("migrate down %q: want a positive number of steps", rest[0])}
			}
		}
		if v, _, err := store.SchemaVersion(ctx, dbase.ownerURL); err == nil && v == 0 {
			return fmt.Errorf("the schema is at version 0: there is nothing to migrate down")
		}
		if err := store.MigrateDown(ctx, dbase.ownerURL, steps); err != nil {
			return err
		}
	case "force":
		if len(rest) != 1 {
			return &usageError{"migrate force needs the version the schema now matches"}
		}
		v, err := strconv.Atoi(rest[0])
		if err != nil || v < 0 {
			return &usageError{fmt.Sprintf("migrate force %q: want a schema version (a whole number)", rest[0])}
		}
		if err := store.MigrateForce(ctx, dbase.ownerURL, v); err != nil {
			return err
		}
	case "version":
	default:
		return &usageError{fmt.Sprintf("migrate %q: want up, down [N], force V or version", verb)}
	}
	v, dirty, err := store.SchemaVersion(ctx, dbase.ownerURL)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "schema version %d (dirty: %t); this binary knows %d\n", v, dirty, store.LatestVersion())
	return nil
}
