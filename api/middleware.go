package api

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"regexp"
	"runtime/debug"
	"time"

	"github.com/labstack/echo/v4"
)

const headerRequestID = "X-Request-Id"

var validRequestID = regexp.MustCompile(`^[A-Za-z0-9._-]{1,64}$`)

type ctxKey int

const requestIDKey ctxKey = iota

// requestID returns the request's id, set by requestIDMiddleware.
func requestID(c echo.Context) string {
	id, _ := c.Get("request_id").(string)
	return id
}

// requestIDMiddleware takes a well-formed X-Request-Id from the client or
// makes one, and returns it in the response.
func (s *Server) requestIDMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		id := c.Request().Header.Get(headerRequestID)
		if !validRequestID.MatchString(id) {
			var b [12]byte
			_, _ = rand.Read(b[:])
			id = hex.EncodeToString(b[:])
		}
		c.Set("request_id", id)
		c.Response().Header().Set(headerRequestID, id)
		req := c.Request()
		c.SetRequest(req.WithContext(context.WithValue(req.Context(), requestIDKey, id)))
		return next(c)
	}
}

// logMiddleware writes one structured line per request.
func (s *Server) logMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		start := time.Now()
		err := next(c)
		if err != nil {
			c.Error(err)
		}
		req := c.Request()
		level := slog.LevelInfo
		status := c.Response().Status
		if status >= 500 {
			level = slog.LevelError
		}
		s.log.LogAttrs(req.Context(), level, "request",
			slog.String("request_id", requestID(c)),
			slog.String("method", req.Method),
			slog.String("route", c.Path()),
			slog.String("path", req.URL.Path),
			slog.Int("status", status),
			slog.Int64("bytes", c.Response().Size),
			slog.Float64("duration_ms", float64(time.Since(start).Microseconds())/1000),
			slog.String("remote", c.RealIP()),
		)
		return nil
	}
}

// recoverMiddleware turns a panic into a 500 with the stack in the log.
func (s *Server) recoverMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) (err error) {
		defer func() {
			if r := recover(); r != nil {
				if r == http.ErrAbortHandler {
					panic(r)
				}
				err = fmt.Errorf("panic: %v\n%s", r, debug.Stack())
			}
		}()
		return next(c)
	}
}

// timeoutMiddleware bounds each request's context, so that no database call
// outlives the request timeout.
func (s *Server) timeoutMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		ctx, cancel := context.WithTimeout(c.Request().Context(), s.cfg.RequestTimeout)
		defer cancel()
		c.SetRequest(c.Request().WithContext(ctx))
		return next(c)
	}
}

// bodyLimitMiddleware refuses bodies over the limit with 413, both when the
// length is declared and when it is only discovered while reading.
func (s *Server) bodyLimitMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		req := c.Request()
		if req.ContentLength > s.cfg.BodyLimit {
			return newProblem(http.StatusRequestEntityTooLarge,
				fmt.Sprintf("the body is %d bytes; the limit is %d", req.ContentLength, s.cfg.BodyLimit))
		}
		if req.Body == nil || req.Body == http.NoBody {
			return next(c)
		}
		req.Body = http.MaxBytesReader(c.Response(), req.Body, s.cfg.BodyLimit)
		if req.ContentLength < 0 {
			// A body of unknown length (chunked) is read here, so that one
			// over the limit gets 413 like one whose Content-Length says so,
			// whichever decoder would have met the limit first.
			raw, err := io.ReadAll(req.Body)
			var mbe *http.MaxBytesError
			if errors.As(err, &mbe) {
				c.Response().Header().Set("Connection", "close")
				return newProblem(http.StatusRequestEntityTooLarge,
					fmt.Sprintf("the body is over the limit of %d bytes", mbe.Limit))
			}
			if err != nil {
				return newProblem(http.StatusBadRequest, "the body could not be read: "+err.Error())
			}
			req.Body, req.ContentLength = io.NopCloser(bytes.NewReader(raw)), int64(len(raw))
		}
		return next(c)
	}
}
