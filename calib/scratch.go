package calib

import "sync"

// slab hands out slices of one backing array, zeroed, and grows by
// starting a new, larger array (the slices already handed out keep the
// old one), so that after a few fits of a size it no longer allocates.
type slab[T any] struct {
	buf []T
	off int
}

// take returns a zeroed slice of length and capacity n.
func (s *slab[T]) take(n int) []T {
	if s.off+n > len(s.buf) {
		s.buf = make([]T, max(2*len(s.buf), s.off+n, 64))
		s.off = 0
	}
	v := s.buf[s.off : s.off+n : s.off+n]
	clear(v)
	s.off += n
	return v
}

// reset makes the whole array available again, dropping what it refers to.
func (s *slab[T]) reset() {
	clear(s.buf[:s.off])
	s.off = 0
}

// rewind makes the whole array available again without clearing it (for
// elements that refer to nothing: take clears what it hands out).
func (s *slab[T]) rewind() { s.off = 0 }

// scratch is the memory one non-linear fit borrows for its temporaries
// (the readings' arrays, the grouping into levels, the start's working
// arrays) and gives back when it returns: nothing taken from it may be
// kept by a result. Fits take it from scratchPool with getScratch and
// return it with release.
type scratch struct {
	f      slab[float64]
	i      slab[int]
	levels slab[curveLevel]
	ptrs   slab[*curveLevel]
	rep    replicates
}

var scratchPool = sync.Pool{New: func() any { return new(scratch) }}

func getScratch() *scratch { return scratchPool.Get().(*scratch) }

// release returns sc to scratchPool; sc and everything taken from it must
// not be used afterwards.
func (sc *scratch) release() {
	sc.f.rewind()
	sc.i.rewind()
	sc.levels.reset()
	sc.ptrs.reset()
	sc.rep = replicates{}
	scratchPool.Put(sc)
}
