package calib

import "sync/atomic"

// setCache is a small four-way set-associative cache of immutable entries
// behind atomic pointers: a lookup is a few loads, concurrent fits share it
// without locks, and a few colliding keys do not evict each other run after
// run. sets must be a power of two. The caller supplies the key's hash.
type setCache[K comparable, V any] struct {
	slots []atomic.Pointer[setEntry[K, V]]
	shift uint // 64 − log2(sets): the top bits of the mixed hash pick the set
}

type setEntry[K comparable, V any] struct {
	key K
	val V
}

func newSetCache[K comparable, V any](sets int) *setCache[K, V] {
	shift := uint(64)
	for n := sets; n > 1; n >>= 1 {
		shift--
	}
	return &setCache[K, V]{slots: make([]atomic.Pointer[setEntry[K, V]], 4*sets), shift: shift}
}

// get returns the value cached for k, or compute() stored under k.
func (c *setCache[K, V]) get(h uint64, k K, compute func() V) V {
	mixed := h * 0x9e3779b97f4a7c15
	set := c.slots[(mixed>>c.shift)*4:][:4]
	free := -1
	for i := range set {
		e := set[i].Load()
		if e == nil {
			if free < 0 {
				free = i
			}
			continue
		}
		if e.key == k {
			return e.val
		}
	}
	if free < 0 {
		free = int(mixed>>7) & 3 // a full set: replace one, chosen by the key
	}
	e := &setEntry[K, V]{key: k, val: compute()}
	set[free].Store(e)
	return e.val
}
