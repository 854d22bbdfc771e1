package api

import (
	"net/http"
	"strconv"
	"sync"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"curvekeeper/lab"
)

// metrics holds the server's Prometheus collectors, on a registry of its own
// so that several servers can live in one process (tests).
type metrics struct {
	registry *prometheus.Registry
	requests *prometheus.CounterVec
	duration *prometheus.HistogramVec

	// series caches the two collectors of each (method, route, status):
	// WithLabelValues hashes its labels on every call, and the set of
	// routes and statuses is small and fixed.
	series sync.Map // seriesKey → *seriesPair
}

type seriesKey struct {
	method, route string
	status        int
}

type seriesPair struct {
	requests prometheus.Counter
	duration prometheus.Observer
}

func newMetrics(db lab.Reader) *metrics {
	m := &metrics{
		registry: prometheus.NewRegistry(),
		requests: prometheus.NewCounterVec(prometheus.CounterOpts{
			Name: "curvekeeper_http_requests_total",
			Help: "HTTP requests by method, route template and status.",
		}, []string{"method", "route", "status"}),
		duration: prometheus.NewHistogramVec(prometheus.HistogramOpts{
			Name:    "curvekeeper_http_request_duration_seconds",
			Help:    "HTTP request latency by method, route template and status.",
			Buckets: []float64{.0005, .001, .0025, .005, .01, .025, .05, .1, .25, .5, 1, 2.5, 5, 10},
		}, []string{"method", "route", "status"}),
	}
	writes := func(name, help string, v func(lab.RunWriteStats) int64) prometheus.Collector {
		return prometheus.NewCounterFunc(prometheus.CounterOpts{Name: name, Help: help},
			func() float64 { return float64(v(db.RunWriteStats())) })
	}
	m.registry.MustRegister(m.requests, m.duration,
		writes("curvekeeper_run_write_groups_total", "Groups of runs written in one transaction.",
			func(s lab.RunWriteStats) int64 { return s.Groups }),
		writes("curvekeeper_run_writes_grouped_total", "Runs written in a group.",
			func(s lab.RunWriteStats) int64 { return s.Grouped }),
		writes("curvekeeper_run_writes_alone_total", "Runs written alone after their group failed (an idempotency key used before, a refused run in the group).",
			func(s lab.RunWriteStats) int64 { return s.Alone }),
		collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	return m
}

// middleware counts and times every request by its route template (never
// the raw path, which would make a series per id).
func (m *metrics) middleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		if err != nil {
			c.Error(err)
		}
		route := c.Path()
		if route == "" {
			route = "unmatched"
		}
		k := seriesKey{methodLabel(c.Request().Method), route, c.Response().Status}
		v, ok := m.series.Load(k)
		if !ok {
			status := strconv.Itoa(k.status)
			v, _ = m.series.LoadOrStore(k, &seriesPair{
				requests: m.requests.WithLabelValues(k.method, route, status),
				duration: m.duration.WithLabelValues(k.method, route, status),
			})
		}
		p := v.(*seriesPair)
		p.requests.Inc()
		p.duration.Observe(time.Since(start).Seconds())
		return nil
	}
}

// methodLabel maps a request's method to a label value from a fixed set: the
// methods of RFC 9110 and PATCH, and "other" for anything else. Go accepts any
// token as a method, so labelling the raw value would let any client, without
// a token, add a series (and a cache entry) per made-up method.
func methodLabel(m string) string {
	switch m {
	case http.MethodGet, http.MethodHead, http.MethodPost, http.MethodPut, http.MethodPatch,
		http.MethodDelete, http.MethodOptions, http.MethodConnect, http.MethodTrace:
		return m
	}
	return "other"
}
