package ledger

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"sync"
	"testing"
)

// checkOrder fails unless Tests and AllTests give every test the
// projection holds, sorted by id afresh, and NumTests counts them.
func checkOrder(t *testing.T, p *Projection, when string) {
	t.Helper()
	want := sorted(p.tests)
	if got := p.Tests(); !slices.Equal(got, want) {
		t.Fatalf("%s: Tests gives %d tests, not the %d held in id order", when, len(got), len(want))
	}
	if got := slices.Collect(p.AllTests()); !slices.Equal(got, want) {
		t.Fatalf("%s: AllTests gives %d tests, not the %d held in id order", when, len(got), len(want))
	}
	if p.NumTests() != len(want) {
		t.Fatalf("%s: NumTests %d, want %d", when, p.NumTests(), len(want))
	}
}

// The order Tests keeps between calls follows every change: tests added,
// rebuilt by a correction, review or void, rebuilt all at once by a new
// set-up, in any order of arrival and with reads in between.
func TestTestsOrderFollowsChanges(t *testing.T) {
	for seed := uint64(1); seed <= 40; seed++ {
		f := newFixture(t, seed)
		rng := rand.New(rand.NewPCG(seed, 5))
		evs := history(f, rng)
		p := NewProjection(f.project)
		for i, j := range rng.Perm(len(evs)) {
			apply(t, p, evs[j])
			if rng.IntN(3) == 0 {
				checkOrder(t, p, fmt.Sprintf("seed %d, after %d events", seed, i+1))
			}
		}
		checkOrder(t, p, "all delivered")
	}
}

// Past many more changes than tests between two reads, the order is
// sorted afresh, and merged again after.
func TestTestsOrderAfterManyChanges(t *testing.T) {
	f := newFixture(t, 9)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("qa", f.setUp()), f.emit("qa", spec), f.emit("qa", ref))
	var recorded []Signed
	for range 1500 {
		s := f.emit("ann", f.test(ref.ID, spec.ID, 110, 12))
		recorded = append(recorded, s)
		apply(t, p, s)
	}
	checkOrder(t, p, "after 1,500 tests")
	for _, s := range recorded { // 1,500 rebuilt tests and then every test again
		apply(t, p, f.emit("office", &TestReviewed{TestID: s.Event.Kind.(*TestRecorded).TestID, Revision: s.Event.ID, Decision: Approve}))
	}
	su := f.setUp()
	su.TimeZone = "UTC"
	apply(t, p, f.emit("qa", su))
	if !p.byID.stale {
		t.Fatalf("%d changes noted for %d tests: the order should be sorted afresh", len(p.byID.changed), len(p.tests))
	}
	checkOrder(t, p, "after 3,000 changes")
	for range 10 {
		apply(t, p, f.emit("ann", f.test(ref.ID, spec.ID, 100, 12)))
	}
	checkOrder(t, p, "after 10 more tests")
}

// Readers may ask for the order at once (a server reports under a read
// lock): run with -race.
func TestTestsOrderConcurrentReaders(t *testing.T) {
	f := newFixture(t, 3)
	p := NewProjection(f.project)
	spec, ref := f.spec(), f.reference()
	apply(t, p, f.emit("qa", spec), f.emit("qa", ref))
	for range 200 {
		apply(t, p, f.emit("ann", f.test(ref.ID, spec.ID, 110, 12)))
	}
	var wg sync.WaitGroup
	counts := make([]int, 4)
	for i := range counts {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for t := range p.AllTests() {
				if t.ID != "" {
					counts[i]++
				}
			}
			counts[i] += len(p.Tests()) + len(p.Snapshot().Tests)
		}()
	}
	wg.Wait()
	for i, n := range counts {
		if n != 3*200 {
			t.Fatalf("reader %d saw %d tests over three reads, want 600", i, n)
		}
	}
}

// A projection with no test gives an empty list, not a nil one: the
// snapshot's JSON, and so the digest, is as it was before the order was
// kept.
func TestTestsEmptyNotNil(t *testing.T) {
	p := NewProjection(newFixture(t, 1).project)
	if p.Tests() == nil || p.Snapshot().Tests == nil {
		t.Fatal("no tests should be an empty list, not nil")
	}
}
