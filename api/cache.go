package api

import (
	"container/list"
	"sync"

	"curvekeeper/lab"
)

// curveCache is a bounded LRU of stored curves by id. Curves' fits are
// immutable, so a cached entry never goes stale except for its review
// status, which callers that report it read fresh (or invalidate on review).
type curveCache struct {
	mu    sync.Mutex
	max   int
	order *list.List // front = most recent; values are *lab.Curve
	byID  map[string]*list.Element
}

func newCurveCache(max int) *curveCache {
	return &curveCache{max: max, order: list.New(), byID: make(map[string]*list.Element, max)}
}

func (c *curveCache) get(id string) (*lab.Curve, bool) {
	c.mu.Lock()
	defer c.mu.Unlock()
	el, ok := c.byID[id]
	if !ok {
		return nil, false
	}
	c.order.MoveToFront(el)
	return el.Value.(*lab.Curve), true
}

func (c *curveCache) put(cv *lab.Curve) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if el, ok := c.byID[cv.ID]; ok {
		el.Value = cv
		c.order.MoveToFront(el)
		return
	}
	c.byID[cv.ID] = c.order.PushFront(cv)
	for c.order.Len() > c.max {
		last := c.order.Back()
		c.order.Remove(last)
		delete(c.byID, last.Value.(*lab.Curve).ID)
	}
}

func (c *curveCache) drop(id string) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if el, ok := c.byID[id]; ok {
		c.order.Remove(el)
		delete(c.byID, id)
	}
}
