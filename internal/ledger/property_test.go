package ledger

import (
	"math/rand/v2"
	"testing"

	"tamp/internal/soil"
)

// history makes a random but plausible project history: set-ups, specs,
// references, a gauge, placements, tests, corrections (some concurrent),
// voids, reviews and retests, from several devices.
func history(f *fixture, rng *rand.Rand) []Signed {
	var out []Signed
	emit := func(dev string, k Kind) Signed {
		s := f.emit(dev, k)
		out = append(out, s)
		return s
	}
	devices := []string{"ann", "bo", "cy"}
	dev := func() string { return devices[rng.IntN(len(devices))] }
	emit("office", f.setUp())
	if rng.IntN(2) == 0 {
		su := f.setUp()
		su.Units, su.WaterDensity = soil.SI, soil.Water1000
		emit("qa", su)
	}
	var specs, refs []string
	for range 1 + rng.IntN(2) {
		s := f.spec()
		if rng.IntN(3) == 0 {
			s.MinCompaction = "95.0"
		}
		specs = append(specs, s.ID)
		emit("qa", s)
		r := f.reference()
		refs = append(refs, r.ID)
		emit("qa", r)
	}
	gauge := &EquipmentRegistered{ID: f.id(true), Kind: NuclearGauge, SerialNumber: "G-1", CalibrationDue: "2026-07-01"}
	emit("office", gauge)
	emit("office", &StandardCountRecorded{EquipmentID: gauge.ID, Date: "2026-06-15", DensityCount: 2800, MoistureCount: 700, Accepted: true})
	place := &LiftPlacementRecorded{ID: f.id(true), Feature: "embankment", LiftNumber: 2, Thickness: 0.2, CompactedVolume: 150}
	emit("office", place)
	type rev struct{ test, event, author string }
	var revs []rev
	var tests []*TestRecorded
	for range 4 + rng.IntN(8) {
		d := dev()
		tr := f.test(refs[rng.IntN(len(refs))], specs[rng.IntN(len(specs))], 100+rng.Float64()*18, 9+rng.Float64()*7)
		if rng.IntN(3) == 0 {
			tr.Content.EquipmentID = gauge.ID
			tr.Content.Readings = Readings{Nuclear: &NuclearReadings{ProbeDepth: 0.15,
				Counts: []soil.NuclearReading{{WetDensity: pcf(120 + rng.Float64()*10), WaterPerVolume: pcf(10 + rng.Float64()*4)}}}}
		}
		if rng.IntN(4) == 0 {
			tr.Content.PlacementID = place.ID
		}
		if len(tests) > 0 && rng.IntN(3) == 0 {
			tr.RetestOf = tests[rng.IntN(len(tests))].TestID
		}
		s := emit(d, tr)
		tests = append(tests, tr)
		revs = append(revs, rev{tr.TestID, s.Event.ID, d})
	}
	for range rng.IntN(10) {
		base := revs[rng.IntN(len(revs))] // a random revision: some are concurrent
		c := TestCorrected{TestID: base.test, Supersedes: base.event, Reason: "field sheet re-read", Content: tests[0].Content}
		c.Content.Readings = sandCone(100+rng.Float64()*18, 9+rng.Float64()*7)
		s := emit(base.author, &c)
		revs = append(revs, rev{base.test, s.Event.ID, base.author})
	}
	for range rng.IntN(3) {
		emit(dev(), &TestVoided{TestID: tests[rng.IntN(len(tests))].TestID, Reason: "wrong lift"})
	}
	for range rng.IntN(2) {
		r := revs[rng.IntN(len(revs))]
		emit("qa", &ExceptionAccepted{TestID: r.test, Revision: r.event, Reason: "accepted as it stands"})
	}
	for range rng.IntN(6) {
		r := revs[rng.IntN(len(revs))]
		d := Approve
		if rng.IntN(2) == 0 {
			d = Return
		}
		emit("office", &TestReviewed{TestID: r.test, Revision: r.event, Decision: d, Comment: "see sheet"})
	}
	return out
}

// deliver applies events in a random order, with some applied twice.
func deliver(t *testing.T, p *Projection, evs []Signed, rng *rand.Rand) {
	t.Helper()
	order := rng.Perm(len(evs))
	for _, i := range order {
		for range 1 + rng.IntN(2) {
			if _, err := p.Apply(evs[i]); err != nil {
				t.Fatalf("apply: %v", err)
			}
		}
	}
}

// Property: replicas that hold the same set of events have identical
// state, whatever the order, duplicates and partial deliveries on the way.
func TestPropertyConvergence(t *testing.T) {
	for seed := uint64(1); seed <= 60; seed++ {
		f := newFixture(t, seed)
		rng := rand.New(rand.NewPCG(seed, 77))
		evs := history(f, rng)

		ref := NewProjection(f.project)
		apply(t, ref, evs...) // in causal order, once each
		want := ref.Digest()

		for r := range 4 {
			p := NewProjection(f.project)
			switch r {
			case 0: // everything shuffled, with duplicates
				deliver(t, p, evs, rng)
			case 1: // reversed
				for i := len(evs) - 1; i >= 0; i-- {
					apply(t, p, evs[i])
				}
			default: // a partial delivery first, compared with another replica holding the same part
				part := rng.Perm(len(evs))[:len(evs)/2]
				var sub []Signed
				for _, i := range part {
					sub = append(sub, evs[i])
				}
				q := NewProjection(f.project)
				deliver(t, p, sub, rng)
				deliver(t, q, sub, rng)
				if p.Digest() != q.Digest() {
					t.Fatalf("seed %d: replicas with the same %d events differ", seed, len(sub))
				}
				deliver(t, p, evs, rng)
			}
			if got := p.Digest(); got != want {
				a, b := ref.Snapshot(), p.Snapshot()
				t.Fatalf("seed %d replica %d: state differs from the causal-order replica\nwant tests %d got %d", seed, r, len(a.Tests), len(b.Tests))
			}
			if p.Len() != len(evs) {
				t.Fatalf("seed %d: %d events held, want %d", seed, p.Len(), len(evs))
			}
		}
	}
}

// Property: replicas that pull one server log in chunks of random sizes,
// with chunks re-sent after simulated cuts, hold the server's chain and the
// same state.
func TestPropertyChainReplication(t *testing.T) {
	for seed := uint64(1); seed <= 30; seed++ {
		f := newFixture(t, seed+1000)
		rng := rand.New(rand.NewPCG(seed, 99))
		evs := history(f, rng)
		log := NewLog(f.project, 1)
		server := NewProjection(f.project)
		for _, i := range rng.Perm(len(evs)) { // the server's arrival order
			log.Append(evs[i].Bytes())
			apply(t, server, evs[i])
		}
		for r := range 3 {
			v := NewVerifier(Start(f.project, 1))
			p := NewProjection(f.project)
			for v.At().Seq < log.Head().Seq {
				if err := v.CheckHead(log.Head()); err != nil {
					t.Fatal(err)
				}
				chunk := log.After(v.At().Seq, 1+rng.IntN(7))
				if rng.IntN(4) == 0 { // cut mid-chunk: only a prefix arrives, it is applied, then pulled again
					chunk = chunk[:rng.IntN(len(chunk)+1)]
				}
				if err := v.Verify(chunk); err != nil {
					t.Fatalf("seed %d replica %d: %v", seed, r, err)
				}
				for _, e := range chunk {
					s, err := Open(mustDecode(t, e.Event).Proto(), f.keys)
					if err != nil {
						t.Fatal(err)
					}
					apply(t, p, s, s) // applied twice: idempotent
				}
			}
			if v.At() != log.Head() {
				t.Fatalf("seed %d replica %d: verified %+v, server head %+v", seed, r, v.At(), log.Head())
			}
			if p.Digest() != server.Digest() {
				t.Fatalf("seed %d replica %d: state differs from the server's", seed, r)
			}
		}
	}
}

func mustDecode(t *testing.T, b []byte) Signed {
	t.Helper()
	s, err := Decode(b)
	if err != nil {
		t.Fatal(err)
	}
	return s
}
