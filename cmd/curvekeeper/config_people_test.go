package main

import (
	"io"
	"testing"
)

func TestPeopleSettings(t *testing.T) {
	none := func(string) string { return "" }
	cfg, _, err := parseConfig("serve", nil, none, io.Discard)
	if err != nil || cfg.MaxFailedSignIns != 5 || cfg.LabZone.String() != "UTC" {
		t.Fatalf("defaults: %d %v %v", cfg.MaxFailedSignIns, cfg.LabZone, err)
	}
	env := map[string]string{"CURVEKEEPER_LAB_TIME_ZONE": "Pacific/Auckland", "CURVEKEEPER_MAX_FAILED_SIGN_INS": "3"}
	cfg, _, err = parseConfig("serve", nil, func(k string) string { return env[k] }, io.Discard)
	if err != nil || cfg.MaxFailedSignIns != 3 || cfg.LabZone.String() != "Pacific/Auckland" {
		t.Fatalf("from the environment: %d %v %v", cfg.MaxFailedSignIns, cfg.LabZone, err)
	}
	for _, args := range [][]string{{"--lab-time-zone", "Mars/Olympus"}, {"--lab-time-zone", "Local"}, {"--max-failed-sign-ins", "-2"}} {
		if _, _, err := parseConfig("serve", args, none, io.Discard); exitCode(err) != 2 {
			t.Errorf("%v: %v, want a usage error", args, err)
		}
	}
}
