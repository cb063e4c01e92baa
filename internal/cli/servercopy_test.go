package cli

import (
	"strings"
	"testing"
	"time"

	"tamp/client"
)

// tamp status says in plain words when the server lacks what the device
// holds, and names entries that have waited too long and what for.
func TestStatusSaysWhatTheServerLacks(t *testing.T) {
	now := time.Date(2026, 6, 16, 9, 0, 0, 0, time.UTC)
	var whole strings.Builder
	printServerCopy(&whole, client.SyncStatus{}, now)
	if whole.Len() != 0 {
		t.Errorf("a whole server copy printed %q", whole.String())
	}
	st := client.SyncStatus{ServerLacks: 3, Unconfirmed: 1,
		ServerMissing: []client.MissingEntry{{Device: "0190d3a0-0000-7000-8000-00000000000d", Seq: 38}},
		LongWaiting: []client.WaitingEntry{{EventID: "e1", Kind: "test_recorded", RecordID: "t1", Since: now.Add(-25 * time.Hour),
			For: []client.WaitedRecord{{ID: "r1", Kind: "reference_added"}, {ID: "x\x1b[2J"}}}}}
	var out strings.Builder
	printServerCopy(&out, st, now)
	for _, want := range []string{
		"  the server lacks 3 entries that this device holds; the next sync pushes them again\n",
		"  1 entry acknowledged by the server not yet seen in its ledger; the next sync checks them\n",
		"  the server lacks 1 entry of other devices that this device does not hold (device#sequence): 0190d3a0-0000-7000-8000-00000000000d#38\n",
		"  test_recorded t1 (entry e1) has waited 25h0m0s for reference_added r1 and a record of unknown kind " + escape("x\x1b[2J") + ", which the server has not received\n",
	} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("status lacks %q; it printed:\n%s", want, out.String())
		}
	}
	if strings.Contains(out.String(), "\x1b") {
		t.Error("status printed a control character")
	}
}
