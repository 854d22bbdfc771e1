package curveplot

import (
	"bytes"
	"math"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/plot/vg"
)

// slopeSeries is an invented slope history of a nitrate curve on an
// invented instrument: in control for 20 days, then a slow loss of
// sensitivity; the last two values are flagged by the caller's rules.
func slopeSeries() Series {
	s := Series{Parameter: "slope", Mean: 0.121, SD: 0.002}
	t0 := time.Date(2026, 2, 2, 9, 30, 0, 0, time.UTC)
	for i := range 26 {
		v := 0.121 + 0.0012*math.Sin(float64(i))
		if i >= 20 {
			v -= 0.0011 * float64(i-19)
		}
		p := TrendPoint{At: t0.AddDate(0, 0, i), Value: v, Label: "curve-" + string(rune('a'+i))}
		switch i {
		case 24:
			p.Violations = []string{"1-2s"}
		case 25:
			p.Violations = []string{"1-3s", "2-2s"}
		}
		s.Points = append(s.Points, p)
	}
	return s
}

func TestControlChartSVG(t *testing.T) {
	s := slopeSeries()
	s.Unit = "response per mg/L"
	b, err := ControlChart(s, Options{Analyte: "nitrate"})
	if err != nil {
		t.Fatalf("ControlChart: %v", err)
	}
	got := svgText(t, b)
	// The rules are listed in the table beside the chart, not written on it,
	// where they ran into each other.
	if strings.Contains(got, "1-3s, 2-2s") {
		t.Error("the chart still writes the violated rules beside the points")
	}
	for _, want := range []string{
		"Control chart: slope, nitrate",
		"Date (UTC)",
		"slope",
		"Centre (mean)",
		"Warning ±2 SD",
		"Action ±3 SD",
		"In control",
		"Rule violated",
		"slope (response per mg/L)", // the y axis names its unit
		"2026-02-05",                // a weekly tick (UTC midnights every 7 days from the epoch)
	} {
		if !strings.Contains(got, want) {
			t.Errorf("SVG text lacks %q", want)
		}
	}
	// The warning and action limits are drawn with their own dash patterns.
	for _, dash := range []string{"stroke-dasharray:6,3", "stroke-dasharray:1.5,2.5"} {
		if !bytes.Contains(b, []byte(dash)) {
			t.Errorf("SVG has no line with %s", dash)
		}
	}
}

func TestControlChartPNG(t *testing.T) {
	w, h := 20*vg.Centimeter, 10*vg.Centimeter
	b, err := ControlChart(slopeSeries(), Options{Format: FormatPNG, Width: w, Height: h})
	if err != nil {
		t.Fatalf("ControlChart: %v", err)
	}
	checkPNG(t, b, w, h)
}

func TestControlChartDegenerate(t *testing.T) {
	one := slopeSeries()
	one.Points = one.Points[:1]
	nan := slopeSeries()
	nan.Points[3].Value = math.NaN()
	nan.Points[4].Value = math.Inf(-1)
	noSD := slopeSeries()
	noSD.SD = 0
	nanMean := slopeSeries()
	nanMean.Mean = math.NaN()
	hours := slopeSeries()
	for i := range hours.Points {
		hours.Points[i].At = hours.Points[0].At.Add(time.Duration(i) * time.Hour)
	}
	tests := []struct {
		name string
		s    Series
		want string // text the figure must show
	}{
		{"empty", Series{Parameter: "slope"}, "no values in this period"},
		{"one value", one, "Centre (mean)"},
		{"NaN values", nan, "Rule violated"},
		{"zero SD", noSD, "no control limits"},
		{"NaN mean", nanMean, "no control limits"},
		{"hourly", hours, "02-02 12:00"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			b, err := ControlChart(tt.s, Options{})
			if err != nil {
				t.Fatalf("ControlChart: %v", err)
			}
			if bytes.Contains(b, []byte("NaN")) || bytes.Contains(b, []byte("Inf")) {
				t.Error("SVG contains NaN or Inf")
			}
			if got := svgText(t, b); !strings.Contains(got, tt.want) {
				t.Errorf("SVG text lacks %q", tt.want)
			}
		})
	}
}

func TestDayTicks(t *testing.T) {
	day := 86400.0
	lo := float64(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).Unix())
	tests := []struct {
		name      string
		span      float64
		wantFirst string
		wantN     int
	}{
		{"five days", 5 * day, "2026-01-01", 6},
		{"a month", 30 * day, "2026-01-01", 5}, // 7-day steps from the epoch: Jan 1, 8, 15, 22, 29 (Thursdays)
		{"a day", day, "01-01 00:00", 7},       // every 4 hours
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			ticks := dayTicks{}.Ticks(lo, lo+tt.span)
			if len(ticks) != tt.wantN || ticks[0].Label != tt.wantFirst {
				t.Errorf("got %d ticks, first %q; want %d, first %q", len(ticks), ticks[0].Label, tt.wantN, tt.wantFirst)
			}
		})
	}
}
