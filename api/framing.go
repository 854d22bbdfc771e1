package api

import (
	"bytes"
	"context"
	"net"
	"net/http"
	"strconv"
	"sync"

	"github.com/labstack/echo/v4"
)

// A request that carries both Content-Length and Transfer-Encoding has two
// framings; RFC 9112 §6.3 says a server may process it by Transfer-Encoding
// but must then close the connection, and that such a message "ought to be
// handled as an error". Go's server keeps the chunked framing, drops the
// Content-Length header before a handler can see it and keeps the connection
// open, so behind a proxy that frames by Content-Length a second request
// hidden in the body would be served (request smuggling).
//
// FramingGuard watches the bytes of each plain-text HTTP/1.1 connection with a
// small parser of the message framing (request line, header names, body
// lengths, chunk sizes) and notes which requests on it carried both headers;
// the server refuses those with 400 and closes the connection, so nothing
// behind them is read. Use it as both the listener and the ConnContext of the
// http.Server:
//
//	ln = api.FramingGuard(ln)
//	hs.ConnContext = api.FramingContext
//
// TLS connections are not watched (the parser would see ciphertext); a
// proxy in front of the service normally reaches it over plain HTTP.
func FramingGuard(ln net.Listener) net.Listener { return &framingListener{Listener: ln} }

// FramingContext puts the connection's framing record into its context, for
// an http.Server's ConnContext.
func FramingContext(ctx context.Context, c net.Conn) context.Context {
	if fc, ok := c.(*framingConn); ok {
		return context.WithValue(ctx, framingKey{}, &fc.rec)
	}
	return ctx
}

type framingKey struct{}

type framingListener struct{ net.Listener }

func (l *framingListener) Accept() (net.Conn, error) {
	c, err := l.Listener.Accept()
	if err != nil {
		return nil, err
	}
	return &framingConn{Conn: c}, nil
}

type framingConn struct {
	net.Conn
	p   framingParser // used by Read only; the server reads from one goroutine at a time
	rec framingRecord
}

func (c *framingConn) Read(b []byte) (int, error) {
	n, err := c.Conn.Read(b)
	if n > 0 {
		c.p.feed(b[:n], &c.rec)
	}
	return n, err
}

// framingRecord is what the parser learned and what the handlers consumed.
type framingRecord struct {
	mu        sync.Mutex
	ambiguous map[int]bool // index of each request with both headers
	served    int          // requests handed to the handler so far
}

// next reports whether the next request handled on this connection carried
// both Content-Length and Transfer-Encoding. Go's server hands requests of one
// connection to the handler in order, after reading each one's header block,
// so the n-th call answers for the n-th header block.
func (r *framingRecord) next() bool {
	r.mu.Lock()
	defer r.mu.Unlock()
	i := r.served
	r.served++
	return r.ambiguous[i]
}

func (r *framingRecord) mark(i int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.ambiguous == nil {
		r.ambiguous = map[int]bool{}
	}
	r.ambiguous[i] = true
}

// framingParser follows the HTTP/1.1 message framing of a request stream.
type framingParser struct {
	state     framingState
	line      []byte // the current line, its first maxLine bytes
	lineLen   int
	remaining int64 // bytes left in a fixed body or a chunk
	requests  int   // header blocks seen
	inHeader  bool  // the request line has been read
	hasCL     bool
	hasTE     bool
	length    int64
}

type framingState int

const (
	stateHeaderLine framingState = iota
	stateFixedBody
	stateChunkSize
	stateChunkData
	stateChunkEnd
	stateTrailer
	stateLost // the stream did not parse; Go's server refuses it itself
)

const maxLine = 256

func (p *framingParser) feed(b []byte, rec *framingRecord) {
	for len(b) > 0 && p.state != stateLost {
		switch p.state {
		case stateFixedBody, stateChunkData:
			n := min(int64(len(b)), p.remaining)
			b = b[n:]
			p.remaining -= n
			if p.remaining == 0 {
				if p.state == stateFixedBody {
					p.state = stateHeaderLine
				} else {
					p.state = stateChunkEnd
				}
			}
			continue
		}
		i := bytes.IndexByte(b, '\n')
		chunk := b
		if i >= 0 {
			chunk = b[:i]
		}
		if room := maxLine - len(p.line); room > 0 {
			p.line = append(p.line, chunk[:min(room, len(chunk))]...)
		}
		p.lineLen += len(chunk)
		if i < 0 {
			return
		}
		b = b[i+1:]
		line := bytes.TrimSuffix(p.line, []byte("\r"))
		p.lineEnd(line, rec)
		p.line = p.line[:0]
		p.lineLen = 0
	}
}

func (p *framingParser) lineEnd(line []byte, rec *framingRecord) {
	switch p.state {
	case stateHeaderLine:
		if !p.inHeader {
			if len(line) == 0 {
				return // a stray empty line between requests
			}
			p.inHeader, p.hasCL, p.hasTE, p.length = true, false, false, 0
			return
		}
		if len(line) > 0 {
			name, value, ok := bytes.Cut(line, []byte(":"))
			if !ok {
				p.state = stateLost
				return
			}
			switch {
			case bytes.EqualFold(bytes.TrimSpace(name), []byte("Content-Length")):
				p.hasCL = true
				n, err := strconv.ParseInt(string(bytes.TrimSpace(value)), 10, 64)
				if err != nil || n < 0 {
					p.state = stateLost
					return
				}
				p.length = n
			case bytes.EqualFold(bytes.TrimSpace(name), []byte("Transfer-Encoding")):
				p.hasTE = true
			}
			return
		}
		// The empty line ends the header block.
		if p.hasCL && p.hasTE {
			rec.mark(p.requests)
		}
		p.requests++
		p.inHeader = false
		switch {
		case p.hasTE:
			p.state = stateChunkSize
		case p.length > 0:
			p.state, p.remaining = stateFixedBody, p.length
		}
	case stateChunkSize:
		size, _, _ := bytes.Cut(line, []byte(";"))
		n, err := strconv.ParseInt(string(bytes.TrimSpace(size)), 16, 64)
		if err != nil || n < 0 || p.lineLen > maxLine {
			p.state = stateLost
			return
		}
		if n == 0 {
			p.state = stateTrailer
		} else {
			p.state, p.remaining = stateChunkData, n
		}
	case stateChunkEnd:
		if len(line) != 0 {
			p.state = stateLost
			return
		}
		p.state = stateChunkSize
	case stateTrailer:
		if len(line) == 0 {
			p.state = stateHeaderLine
		}
	}
}

// framingMiddleware refuses a request that carried both Content-Length and
// Transfer-Encoding, and closes its connection so that nothing read behind it
// is served.
func (s *Server) framingMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		r := c.Request()
		if rec, ok := r.Context().Value(framingKey{}).(*framingRecord); ok && r.ProtoMajor == 1 && rec.next() {
			c.Response().Header().Set("Connection", "close")
			return newProblem(http.StatusBadRequest,
				"the request carries both Content-Length and Transfer-Encoding; send one of them (RFC 9112 §6.3)")
		}
		return next(c)
	}
}
