package api

import (
	"context"
	"net/http"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"
	"github.com/prometheus/client_golang/prometheus"

	"curvekeeper/api/qaui"
	"curvekeeper/lab"
)

// readOnlyDetail is what a write to a read-only instance is told.
const readOnlyDetail = "this instance serves reads only: its database is a standby in recovery; send writes to the primary's instances"

// readOnlyRetryAfter is the Retry-After of that refusal, in seconds: about
// the time a failover (promotion, then the service's next check) takes.
const readOnlyRetryAfter = "5"

// HeaderWriteLSN carries a write's WAL position: set on every successful
// write when read replicas are configured, and sent back by a client (or
// as the cookie of the same name, which the QA pages carry) so that its
// reads go only to a replica that has replayed that write.
const HeaderWriteLSN = "Curvekeeper-Write-LSN"

const cookieWriteLSN = "ck_write_lsn"

// writeLSNCookieAge is how long the cookie lives. Past it every replica has
// replayed the write or lags over the bound (and gets no reads anyway).
const writeLSNCookieAge = 5 * time.Minute

// readOnlyRoutes are the POST routes that store nothing (inverse
// prediction), which a read-only instance serves.
var readOnlyRoutes = map[string]bool{
	"/v1/curves/:id/predictions":              true,
	"/v1/instruments/:instrument/predictions": true,
}

// isWriteRequest reports whether the request changes stored data: POST,
// PUT, PATCH or DELETE under /v1/ or /ui/, except readOnlyRoutes.
func isWriteRequest(c echo.Context) bool {
	switch c.Request().Method {
	case http.MethodPost, http.MethodPut, http.MethodPatch, http.MethodDelete:
	default:
		return false
	}
	p := c.Request().URL.Path
	return (strings.HasPrefix(p, "/v1/") || strings.HasPrefix(p, "/ui/")) && !readOnlyRoutes[c.Path()]
}

type readsKey struct{}

// readsFrom is what replicationMiddleware leaves in a read's context: the
// client's last write position, if it sent one.
type readsFrom struct{ afterLSN string }

// reading returns the service a lag-tolerant read uses: its stored reads
// come from a read replica within the lag bound that has replayed the
// client's last write (Curvekeeper-Write-LSN, or the QA pages' cookie), or
// from the primary. Outside a GET or HEAD (or with no replicas) it is the
// primary's service itself. Handlers call it for the reads that may be
// served up to the lag bound stale (README, "Scaling out"); writes, token,
// session and signature checks use s.lab.
func (s *Server) reading(ctx context.Context) *lab.Service {
	r, ok := ctx.Value(readsKey{}).(readsFrom)
	if !ok {
		return s.lab
	}
	rd := s.topo.ReadsFor(r.afterLSN)
	if rd == s.lab.Reader { // kept on the primary
		return s.lab
	}
	return s.lab.ReadingFrom(rd)
}

// byID runs a read of one record by its id on reading(ctx) and, when that
// is a replica that does not know the id (KindNotFound), once more on the
// primary: the id may come from a write the replica has not replayed yet
// (another client's, or one whose LSN the client did not send back). It
// returns the service that answered, for the reads that follow.
func byID[T any](ctx context.Context, s *Server, read func(*lab.Service) (T, error)) (T, *lab.Service, error) {
	rd := s.reading(ctx)
	v, err := read(rd)
	if rd != s.lab && lab.KindOf(err) == lab.KindNotFound {
		rd = s.lab
		v, err = read(rd)
	}
	return v, rd, err
}

// replicationMiddleware refuses writes while the database is a standby
// (503 with Retry-After, before any work or authentication: nothing would
// be stored, whoever asks), turns a write refused by PostgreSQL as
// read-only (SQLSTATE 25006, the database became a standby after the last
// check) into the same 503 and switches the instance to read-only, marks
// successful writes with their WAL position when read replicas exist, and
// lets GET and HEAD requests read from a replica.
func (s *Server) replicationMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		req := c.Request()
		if !isWriteRequest(c) {
			if s.topo.HasReplicas() && (req.Method == http.MethodGet || req.Method == http.MethodHead) {
				r := readsFrom{afterLSN: req.Header.Get(HeaderWriteLSN)}
				if ck, err := req.Cookie(cookieWriteLSN); err == nil && r.afterLSN == "" {
					r.afterLSN = ck.Value
				}
				c.SetRequest(req.WithContext(context.WithValue(req.Context(), readsKey{}, r)))
			}
			return next(c)
		}
		if s.topo.ReadOnly() {
			return s.refuseWrite(c)
		}
		if s.topo.HasReplicas() {
			c.Response().Before(func() { s.markWrite(c) })
		}
		err := next(c)
		if err != nil && s.topo.NoteError(err) {
			s.log.Warn("the database refused a write as a standby: serving reads only until a check finds it writable",
				"request_id", requestID(c))
			return s.refuseWrite(c)
		}
		return err
	}
}

// refuseWrite answers a write on a read-only instance.
func (s *Server) refuseWrite(c echo.Context) error {
	c.Response().Header().Set("Retry-After", readOnlyRetryAfter)
	if qaui.IsPath(c.Request().URL.Path) {
		return s.ui.Error(c, http.StatusServiceUnavailable, "This instance serves reads only just now (its database is a standby). Reviews and sign-in need the primary's instance; try again in a moment.")
	}
	return newProblem(http.StatusServiceUnavailable, readOnlyDetail)
}

// markWrite runs just before a write's response header goes out: on
// success (2xx, or a QA form's 303 to the page that shows its result) it
// adds the primary's WAL position, which covers the write, as the header
// and as the cookie. The browser sends the cookie with the GET the 303
// leads to, so that page reads from a replica that has replayed the write,
// or from the primary.
func (s *Server) markWrite(c echo.Context) {
	if st := c.Response().Status; (st < 200 || st > 299) && st != http.StatusSeeOther {
		return
	}
	ctx, cancel := context.WithTimeout(context.WithoutCancel(c.Request().Context()), time.Second)
	defer cancel()
	lsn, err := s.topo.WriteLSN(ctx)
	if err != nil {
		s.log.Warn("read the WAL position of a write", "request_id", requestID(c), "error", err)
		return
	}
	c.Response().Header().Set(HeaderWriteLSN, lsn)
	c.SetCookie(&http.Cookie{Name: cookieWriteLSN, Value: lsn, Path: "/", MaxAge: int(writeLSNCookieAge / time.Second),
		HttpOnly: true, Secure: c.IsTLS(), SameSite: http.SameSiteStrictMode})
}

// replicationCollector reports read-only mode and the read replicas to
// Prometheus, read at each scrape from what the last check found.
type replicationCollector struct {
	db                                     lab.Topology
	readOnly, lag, inUse, reads, fallbacks *prometheus.Desc
}

func newReplicationCollector(db lab.Topology) *replicationCollector {
	return &replicationCollector{db: db,
		readOnly: prometheus.NewDesc("curvekeeper_read_only", "1 while the database is a standby in recovery and writes answer 503.", nil, nil),
		lag: prometheus.NewDesc("curvekeeper_replica_lag_seconds",
			"How far each read replica is behind the primary, as of the last check (absent when unknown).", []string{"replica"}, nil),
		inUse: prometheus.NewDesc("curvekeeper_replica_in_use", "1 when reads go to the replica (it answers, is a standby, has the schema and lags at most the bound).", []string{"replica"}, nil),
		reads: prometheus.NewDesc("curvekeeper_replica_reads_total", "Reads sent to each read replica.", []string{"replica"}, nil),
		fallbacks: prometheus.NewDesc("curvekeeper_replica_fallback_reads_total",
			"Lag-tolerant reads kept on the primary because no replica was in use or none had replayed the client's write.", nil, nil),
	}
}

func (rc *replicationCollector) Describe(ch chan<- *prometheus.Desc) {
	ch <- rc.readOnly
	ch <- rc.lag
	ch <- rc.inUse
	ch <- rc.reads
	ch <- rc.fallbacks
}

func (rc *replicationCollector) Collect(ch chan<- prometheus.Metric) {
	ch <- prometheus.MustNewConstMetric(rc.readOnly, prometheus.GaugeValue, boolFloat(rc.db.ReadOnly()))
	if !rc.db.HasReplicas() {
		return
	}
	ch <- prometheus.MustNewConstMetric(rc.fallbacks, prometheus.CounterValue, float64(rc.db.PrimaryReads()))
	for i, r := range rc.db.Replicas() {
		label := strconv.Itoa(i + 1)
		if r.Lag >= 0 {
			ch <- prometheus.MustNewConstMetric(rc.lag, prometheus.GaugeValue, r.Lag.Seconds(), label)
		}
		ch <- prometheus.MustNewConstMetric(rc.inUse, prometheus.GaugeValue, boolFloat(r.InUse), label)
		ch <- prometheus.MustNewConstMetric(rc.reads, prometheus.CounterValue, float64(r.Reads), label)
	}
}

func boolFloat(b bool) float64 {
	if b {
		return 1
	}
	return 0
}
