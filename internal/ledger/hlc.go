package ledger

import (
	"sync"
	"time"
)

// HLC is a hybrid logical clock timestamp: the largest wall time seen, in
// microseconds since 1970-01-01 UTC, and a counter within it. It orders
// events causally (an event made after receiving another has a larger HLC)
// and stays close to wall time, but never depends on one device's clock.
type HLC struct {
	Wall    int64 // microseconds since 1970-01-01 UTC
	Logical uint32
}

// Compare returns -1, 0 or +1 as h is before, equal to or after o.
func (h HLC) Compare(o HLC) int {
	switch {
	case h.Wall < o.Wall:
		return -1
	case h.Wall > o.Wall:
		return 1
	case h.Logical < o.Logical:
		return -1
	case h.Logical > o.Logical:
		return 1
	}
	return 0
}

// IsZero reports whether h was never set.
func (h HLC) IsZero() bool { return h == HLC{} }

// Clock issues HLC timestamps. It is safe for concurrent use.
type Clock struct {
	now  func() time.Time
	mu   sync.Mutex
	last HLC
}

// NewClock returns a clock reading wall time from now (time.Now when nil),
// starting after last (a device restores its last issued timestamp so the
// clock never runs backwards across restarts).
func NewClock(now func() time.Time, last HLC) *Clock {
	if now == nil {
		now = time.Now
	}
	return &Clock{now: now, last: last}
}

// Now returns a timestamp after every one this clock issued or observed.
func (c *Clock) Now() HLC {
	c.mu.Lock()
	defer c.mu.Unlock()
	pt := c.now().UnixMicro()
	if pt > c.last.Wall {
		c.last = HLC{Wall: pt}
	} else {
		c.last.Logical++
	}
	return c.last
}

// Observe merges a timestamp received from elsewhere, so that later
// timestamps of this clock come after it.
func (c *Clock) Observe(remote HLC) {
	c.mu.Lock()
	defer c.mu.Unlock()
	if remote.Compare(c.last) > 0 {
		c.last = remote
	}
}

// Last returns the latest timestamp issued or observed, for persisting.
func (c *Clock) Last() HLC {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.last
}
