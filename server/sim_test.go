package server_test

import (
	"context"
	"math/rand/v2"
	"testing"

	"tamp/client"
	"tamp/server"
)

// TestRandomCrewDay drives a crew through a random day: inspectors record,
// correct, void and retest, the office reviews, and everyone syncs at random
// moments. At the end of the day every device and the server hold the same
// ledger, and the server holds every entry anyone made, once.
func TestRandomCrewDay(t *testing.T) {
	for seed := uint64(1); seed <= 4; seed++ {
		rng := rand.New(rand.NewPCG(seed, 31))
		c := startCluster(t, t.TempDir())
		project := c.newProject("Sagebrush Flats pad")
		qa := c.device("quinn", server.QA)
		office := c.device("olga", server.Office)
		inspectors := []*client.Store{c.device("ann", server.Inspector), c.device("bo", server.Inspector)}
		spec, ref := setUp(t, c, qa, project)
		everyone := append([]*client.Store{qa, office}, inspectors...)
		cc := c.conn("")
		ctx := context.Background()
		made := 3 // set-up, spec, reference
		for range 120 {
			in := inspectors[rng.IntN(2)]
			switch k := rng.IntN(10); {
			case k < 4:
				if _, err := in.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref,
					Readings: coneReadings(104+rng.Float64()*12, 11+rng.Float64()*3)}); err != nil {
					t.Fatal(err)
				}
				made++
			case k < 6:
				tests := in.Today(project)
				if len(tests) == 0 {
					continue
				}
				tt := tests[rng.IntN(len(tests))]
				if tt.Author != in.User() || tt.Voided {
					continue
				}
				if rng.IntN(3) == 0 {
					if err := in.VoidTest(ctx, project, tt.ID, "wrong lift"); err != nil {
						t.Fatal(err)
					}
				} else if _, err := in.CorrectTest(ctx, project, tt.ID, "re-read the sheet", func(c *client.TestInput) {
					c.Readings = coneReadings(104+rng.Float64()*12, 12)
				}); err != nil {
					t.Fatal(err)
				}
				made++
			case k < 7:
				fails := in.OpenFailures(project)
				if len(fails) == 0 {
					continue
				}
				if _, err := in.RecordRetest(ctx, project, fails[0].ID, client.RetestInput{Readings: coneReadings(113, 12)}); err != nil {
					t.Fatal(err)
				}
				made++
			case k < 8:
				tests := office.Today(project)
				if len(tests) == 0 {
					continue
				}
				tt := tests[rng.IntN(len(tests))]
				d := client.Approve
				if tt.Result.Verdict == client.Fail {
					d = client.Return
				}
				if err := office.ReviewTest(ctx, project, tt.ID, d, "see the sheet"); err != nil {
					t.Fatal(err)
				}
				made++
			default:
				s := everyone[rng.IntN(len(everyone))]
				if _, err := s.Sync(ctx, cc, project, client.SyncOptions{}); err != nil {
					t.Fatalf("seed %d: sync: %v", seed, err)
				}
			}
		}
		for range 2 {
			for _, s := range everyone {
				syncOK(t, s, cc, project)
			}
		}
		head := c.head()
		rejected := 0
		for _, s := range everyone {
			rs, _ := s.Rejected(ctx)
			rejected += len(rs)
		}
		if held := c.memberEntries(project); held+rejected != made {
			t.Errorf("seed %d: server holds %d, %d rejected, %d made", seed, held, rejected, made)
		}
		for _, s := range everyone {
			if s.Digest(project) != c.digest() {
				t.Errorf("seed %d: a device's state differs from the server's", seed)
			}
			if o, _ := s.Outbox(ctx); o.Pending != 0 {
				t.Errorf("seed %d: %d entries still pending", seed, o.Pending)
			}
		}
		t.Logf("seed %d: %d entries, %d rejected", seed, head.Seq, rejected)
	}
}
