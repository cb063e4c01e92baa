package cli

import (
	"fmt"
	"io"
	"strings"
	"time"

	"tamp/client"
)

// printServerCopy writes, under a project's line of tamp status, what the
// device knows of the server's copy of the project when it is not whole:
// entries the server lacks, entries not yet seen in its ledger, entries it
// asked for that this device does not hold, and entries that have waited
// too long for records the server has not received.
func printServerCopy(w io.Writer, st client.SyncStatus, now time.Time) {
	if st.ServerLacks > 0 {
		fmt.Fprintf(w, "  the server lacks %s that this device holds; the next sync pushes them again\n", entries(st.ServerLacks))
	}
	if st.Unconfirmed > 0 {
		fmt.Fprintf(w, "  %s acknowledged by the server not yet seen in its ledger; the next sync checks them\n", entries(st.Unconfirmed))
	}
	if n := len(st.ServerMissing); n > 0 {
		names := make([]string, 0, n)
		for _, m := range st.ServerMissing {
			names = append(names, fmt.Sprintf("%s#%d", escape(m.Device), m.Seq))
		}
		fmt.Fprintf(w, "  the server lacks %s of other devices that this device does not hold (device#sequence): %s\n",
			entries(n), strings.Join(names, " "))
	}
	for _, e := range st.LongWaiting {
		var waits []string
		for _, r := range e.For {
			kind := "a record of unknown kind"
			if r.Kind != "" {
				kind = escape(r.Kind)
			}
			waits = append(waits, kind+" "+escape(r.ID))
		}
		fmt.Fprintf(w, "  %s %s (entry %s) has waited %s for %s, which the server has not received\n", escape(e.Kind), escape(e.RecordID),
			escape(e.EventID), now.Sub(e.Since).Round(time.Minute), strings.Join(waits, " and "))
	}
}

func entries(n int) string {
	if n == 1 {
		return "1 entry"
	}
	return fmt.Sprintf("%d entries", n)
}
