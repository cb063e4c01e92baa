package ledger

import (
	"math/rand/v2"
	"sync"
	"testing"

	"tamp/internal/qc"
)

// TestRowsKeptInStep applies random histories one event at a time, asking
// for the rows between (from several readers at once, as a server's
// reports do), and checks every row against its test: rows copied from an
// earlier call must still say what the test says.
func TestRowsKeptInStep(t *testing.T) {
	for seed := range uint64(12) {
		f := newFixture(t, 700+seed)
		rng := rand.New(rand.NewPCG(seed, 3))
		evs := history(f, rng)
		rng.Shuffle(len(evs), func(i, j int) { evs[i], evs[j] = evs[j], evs[i] })
		p := NewProjection(f.project)
		for i, s := range evs {
			if _, err := p.Apply(s); err != nil {
				t.Fatalf("seed %d: apply: %v", seed, err)
			}
			if i%3 != 0 && i != len(evs)-1 {
				continue
			}
			var wg sync.WaitGroup
			for range 3 {
				wg.Go(func() { p.TestRows() })
			}
			wg.Wait()
			checkRows(t, p)
		}
	}
}

func checkRows(t *testing.T, p *Projection) {
	t.Helper()
	rows, tests := p.TestRows(), p.Tests()
	if len(rows.Rows) != len(tests) {
		t.Fatalf("%d rows for %d tests", len(rows.Rows), len(tests))
	}
	for i, r := range rows.Rows {
		x := tests[i]
		if r.Test != x || r.ID != x.ID || r.HLC != x.HLC || r.DryDensity != x.Result.DryDensity || r.RelativeCompaction != x.Result.RelativeCompaction {
			t.Fatalf("row %d is of test %s (%v), want %s as it stands", i, r.ID, r.HLC, x.ID)
		}
		if rows.ID(r.Placement) != x.Content.PlacementID || rows.ID(r.Spec) != x.Content.SpecID {
			t.Errorf("test %s: row names placement %q and spec %q, want %q and %q", x.ID, rows.ID(r.Placement), rows.ID(r.Spec),
				x.Content.PlacementID, x.Content.SpecID)
		}
		retested, _ := p.Test(x.RetestOf)
		if r.Retested != retested {
			t.Errorf("test %s: row retests %v, want %v", x.ID, r.Retested, retested)
		}
		counts := !x.Voided() && x.ReviewStatus != Returned && x.Result.Verdict != qc.Pending
		for _, b := range []struct {
			name      string
			got, want bool
		}{
			{"counts", r.State.Counts(), counts},
			{"fail", r.State&RowFail != 0, x.Result.Verdict == qc.Fail},
			{"pass", r.State&RowPass != 0, x.Result.Verdict == qc.Pass},
			{"unreviewed", r.State&RowUnreviewed != 0, x.ReviewStatus == Unreviewed},
			{"exception", r.State&RowExceptionAccepted != 0, x.ExceptionAccepted()},
			{"retest", r.State&RowRetest != 0, x.RetestOf != ""},
			{"revised", r.State&RowRevised != 0, len(x.Revisions) > 1},
			{"reviewed", r.State&RowReviewed != 0, len(x.Reviews) > 0},
			{"flagged", r.State&RowFlagged != 0, len(x.Flags) > 0},
		} {
			if b.got != b.want {
				t.Errorf("test %s: row says %s %v, want %v", x.ID, b.name, b.got, b.want)
			}
		}
		if r.Reviewer != 0 {
			for _, rv := range x.Reviews {
				if rv.Author != rows.ID(r.Reviewer) || rv.HLC.Wall < r.FirstReview {
					t.Errorf("test %s: row says every review is by %s from %d; review %s is by %s at %d", x.ID, rows.ID(r.Reviewer),
						r.FirstReview, rv.EventID, rv.Author, rv.HLC.Wall)
				}
			}
		}
	}
}
