package api

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"time"

	"github.com/prometheus/common/expfmt"

	"curvekeeper/api/oapi"
	"curvekeeper/openapi"
)

// GetHealthz answers 200 while the process is alive.
func (s *Server) GetHealthz(ctx context.Context, _ oapi.GetHealthzRequestObject) (oapi.GetHealthzResponseObject, error) {
	return oapi.GetHealthz200JSONResponse{Status: oapi.HealthOK}, nil
}

// GetReadyz answers 200 when the database answers and its schema is current,
// saying whether the instance serves reads only and how its read replicas
// stand.
func (s *Server) GetReadyz(ctx context.Context, _ oapi.GetReadyzRequestObject) (oapi.GetReadyzResponseObject, error) {
	ctx, cancel := context.WithTimeout(ctx, 2*time.Second)
	defer cancel()
	if err := s.lab.Ping(ctx); err != nil {
		s.log.Warn("readyz: database unreachable", "error", err)
		return nil, newProblem(http.StatusServiceUnavailable, "the database cannot be reached")
	}
	if err := s.lab.CheckSchema(ctx); err != nil {
		return nil, newProblem(http.StatusServiceUnavailable, err.Error())
	}
	out := oapi.GetReadyz200JSONResponse{Status: oapi.ReadinessReady, Mode: oapi.ModeReadWrite}
	if s.topo.ReadOnly() {
		out.Mode = oapi.ModeReadOnly
	}
	if s.topo.HasReplicas() {
		reps := make([]oapi.ReplicaReadiness, 0, len(s.topo.Replicas()))
		for i, r := range s.topo.Replicas() {
			rr := oapi.ReplicaReadiness{Replica: i + 1, InUse: r.InUse}
			if r.Lag >= 0 {
				lag := r.Lag.Seconds()
				rr.LagSeconds = &lag
			}
			if r.Reason != "" {
				rr.Reason = &r.Reason
			}
			reps = append(reps, rr)
		}
		out.Replicas = &reps
	}
	return out, nil
}

// GetMetrics serves the Prometheus text exposition of the server's registry.
func (s *Server) GetMetrics(ctx context.Context, _ oapi.GetMetricsRequestObject) (oapi.GetMetricsResponseObject, error) {
	families, err := s.metrics.registry.Gather()
	if err != nil {
		return nil, fmt.Errorf("api: gather metrics: %w", err)
	}
	var buf bytes.Buffer
	enc := expfmt.NewEncoder(&buf, expfmt.NewFormat(expfmt.TypeTextPlain))
	for _, f := range families {
		if err := enc.Encode(f); err != nil {
			return nil, fmt.Errorf("api: encode metrics: %w", err)
		}
	}
	return oapi.GetMetrics200TextResponse(buf.String()), nil
}

// GetOpenAPI serves the OpenAPI document as written.
func (s *Server) GetOpenAPI(ctx context.Context, _ oapi.GetOpenAPIRequestObject) (oapi.GetOpenAPIResponseObject, error) {
	return oapi.GetOpenAPI200ApplicationYamlResponse{Body: bytes.NewReader(openapi.YAML), ContentLength: int64(len(openapi.YAML))}, nil
}
