package main

import (
	"io"
	"testing"
	"time"
)

func TestPeopleSettings(t *testing.T) {
	none := func(string) string { return "" }
	cfg, _, err := parseConfig("serve", nil, none, io.Discard)
	if err != nil || cfg.MaxFailedSignIns != 5 || cfg.LabZone.String() != "UTC" || cfg.SessionTTL != 8*time.Hour || cfg.RequireSignedApproval {
		t.Fatalf("defaults: %d %v %s %v", cfg.MaxFailedSignIns, cfg.LabZone, cfg.SessionTTL, err)
	}
	env := map[string]string{"CURVEKEEPER_LAB_TIME_ZONE": "Pacific/Auckland", "CURVEKEEPER_MAX_FAILED_SIGN_INS": "3", "CURVEKEEPER_SESSION_LENGTH": "30m",
		"CURVEKEEPER_REQUIRE_SIGNED_APPROVAL": "true"}
	cfg, _, err = parseConfig("serve", nil, func(k string) string { return env[k] }, io.Discard)
	if err != nil || cfg.MaxFailedSignIns != 3 || cfg.LabZone.String() != "Pacific/Auckland" || cfg.SessionTTL != 30*time.Minute || !cfg.RequireSignedApproval {
		t.Fatalf("from the environment: %d %v %s %v", cfg.MaxFailedSignIns, cfg.LabZone, cfg.SessionTTL, err)
	}
	for _, args := range [][]string{{"--lab-time-zone", "Mars/Olympus"}, {"--lab-time-zone", "Local"}, {"--max-failed-sign-ins", "-2"},
		{"--session-length", "25h"}, {"--session-length", "0s"}} {
		if _, _, err := parseConfig("serve", args, none, io.Discard); exitCode(err) != 2 {
			t.Errorf("%v: %v, want a usage error", args, err)
		}
	}
}
