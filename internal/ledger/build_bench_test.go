package ledger

import (
	"runtime"
	"testing"
)

// BenchmarkBuild builds a projection from 100,000 test entries (a third of
// them reviewed, one in twenty corrected) and its set-up, as a device's
// open and a server's restart do: build-us/event is the time per event
// applied, live-bytes/event the heap the built projection holds per event.
func BenchmarkBuild(b *testing.B) {
	const tests = 100_000
	f := newFixture(b, 23)
	spec, ref := f.spec(), f.reference()
	evs := []Signed{f.emit("qa", f.setUp()), f.emit("qa", spec), f.emit("qa", ref)}
	for i := range tests {
		rec := f.emit("ann", f.test(ref.ID, spec.ID, 104+float64(i%13), 11+float64(i%5)*0.5))
		evs = append(evs, rec)
		tr := rec.Event.Kind.(*TestRecorded)
		rev := rec.Event.ID
		if i%20 == 7 {
			c := tr.Content
			c.LiftNumber++
			cor := f.emit("ann", &TestCorrected{TestID: tr.TestID, Supersedes: rev, Reason: "lift keyed one low", Content: c})
			evs, rev = append(evs, cor), cor.Event.ID
		}
		if i%3 == 0 {
			evs = append(evs, f.emit("olga", &TestReviewed{TestID: tr.TestID, Revision: rev, Decision: Approve}))
		}
	}
	var p *Projection
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		p = NewProjection(f.project)
		for _, s := range evs {
			if _, err := p.ApplyValidated(s); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.StopTimer()
	if n := len(p.Tests()); n != tests {
		b.Fatalf("%d tests, want %d", n, tests)
	}
	b.ReportMetric(float64(b.Elapsed().Microseconds())/float64(b.N)/float64(len(evs)), "build-us/event")
	evs = nil
	var before, after runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&after)
	runtime.KeepAlive(p)
	p = nil
	runtime.GC()
	runtime.ReadMemStats(&before)
	b.ReportMetric(float64(after.HeapAlloc-before.HeapAlloc)/float64(tests), "live-bytes/test")
}
