package lab

import (
	"testing"
	"time"
)

// TestCheckVerificationMaterial: the rules a verification's reference
// material must meet, each refusal pointing at its field; a material
// prepared from an expired parent is refused like an expired one.
func TestCheckVerificationMaterial(t *testing.T) {
	at := time.Date(2031, 6, 2, 10, 0, 0, 0, time.UTC)
	later, earlier := at.AddDate(1, 0, 0), at.AddDate(0, -1, 0)
	crm := func(code string, mod func(*Material)) *Material {
		m := &Material{MaterialInput: MaterialInput{Code: code, Kind: MaterialReference, Analyte: "nitrate", Unit: "mg/L",
			Value: 3, ExpiresAt: later}, RelativeUncertainty: 0.01}
		if mod != nil {
			mod(m)
		}
		return m
	}
	parentOld := crm("CRM-P", func(m *Material) { m.ExpiresAt = earlier })
	child := crm("CRM-C", func(m *Material) { m.PreparedFrom = "CRM-P" })
	lineage := map[string]*Material{"CRM-P": parentOld, "CRM-C": child}
	for _, tt := range []struct {
		name  string
		m     *Material
		conc  float64
		field string // "" accepted
	}{
		{"in date at its value", crm("CRM-1", nil), 3, ""},
		{"within rounding of its value", crm("CRM-1", nil), 3 * (1 + 1e-12), ""},
		{"expired", crm("CRM-1", func(m *Material) { m.ExpiresAt = earlier }), 3, "/material"},
		{"parent expired", child, 3, "/material"},
		{"another analyte", crm("CRM-1", func(m *Material) { m.Analyte = "nitrite" }), 3, "/material"},
		{"another unit", crm("CRM-1", func(m *Material) { m.Unit = "ug/L" }), 3, "/material"},
		{"a stock solution", crm("CRM-1", func(m *Material) { m.Kind = MaterialStock }), 3, "/material"},
		{"not its value", crm("CRM-1", nil), 2.9, "/concentration"},
	} {
		t.Run(tt.name, func(t *testing.T) {
			err := CheckVerificationMaterial(tt.m, lineage, "nitrate", "mg/L", tt.conc, at)
			if tt.field == "" {
				if err != nil {
					t.Fatalf("refused: %v", err)
				}
				return
			}
			e, ok := err.(*Error)
			if !ok || e.Kind != KindInvalid || e.Field != tt.field {
				t.Fatalf("got %v, want KindInvalid on %s", err, tt.field)
			}
		})
	}
}
