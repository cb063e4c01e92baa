package server

import (
	"context"
	"net"
	"testing"
	"time"

	"google.golang.org/grpc/peer"
)

// canonicalCode brings a code of the current form, however typed, to its
// printed form, and leaves anything else as given.
func TestCanonicalCode(t *testing.T) {
	const want = "7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW"
	for _, tc := range []struct{ typed, want string }{
		{"7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW", want},
		{"7k3qm0vx1zb4cdefghjnprstw", want},
		{"7K3QM 0VX1Z B4CDE FGHJN PRSTW", want},
		{"\t7K3QM\u20130VX1Z\u2014B4CDE-FGHJN-PRSTW\n", want},
		{"7K3QM-OVXIZ-B4CDE-FGHJN-PRSTW", want},                              // O for 0, I for 1
		{"7k3qm-ovxlz-b4cde-fghjn-prstw", want},                              // o for 0, l for 1
		{"7K3QM-0VXLZ-B4CDE-FGHJN-PRSTW", want},                              // L for 1
		{"7K3QM-0VX1Z-B4CDE-FGHJN-PRSTU", "7K3QM-0VX1Z-B4CDE-FGHJN-PRSTU"},   // U is no symbol
		{"7K3QM-0VX1Z-B4CDE-FGHJN-PRST", "7K3QM-0VX1Z-B4CDE-FGHJN-PRST"},     // 24 symbols
		{"7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW0", "7K3QM-0VX1Z-B4CDE-FGHJN-PRSTW0"}, // 26
		{"7K3QM-0VX1Z-B4CDE-FGHJN-PRST\u0174", "7K3QM-0VX1Z-B4CDE-FGHJN-PRST\u0174"},
		{"stale-code", "stale-code"},
		{"", ""},
		// 43 characters of base64url, the earlier form: as given, even
		// when removing its dashes would leave 25 symbols.
		{"A-B-C-D-E-F-G-H-J-K-M-N-P-Q-R-S-T-V-WXYZ012", "A-B-C-D-E-F-G-H-J-K-M-N-P-Q-R-S-T-V-WXYZ012"},
		{"esw3lrziqLyoARlFtJ6Q5Ano-ap6AuvjNOyxEqKJ-BM", "esw3lrziqLyoARlFtJ6Q5Ano-ap6AuvjNOyxEqKJ-BM"},
	} {
		if got := canonicalCode(tc.typed); got != tc.want {
			t.Errorf("canonicalCode(%q) = %q, want %q", tc.typed, got, tc.want)
		}
	}
}

// Failed attempts count per IPv4 address and per IPv6 /64.
func TestCallerAddress(t *testing.T) {
	for _, tc := range []struct {
		addr net.Addr
		want string
	}{
		{&net.TCPAddr{IP: net.ParseIP("192.0.2.7"), Port: 51234}, "192.0.2.7"},
		{&net.TCPAddr{IP: net.ParseIP("::ffff:192.0.2.7"), Port: 51234}, "192.0.2.7"},
		{&net.TCPAddr{IP: net.ParseIP("2001:db8:1:2:3:4:5:6"), Port: 51234}, "2001:db8:1:2::/64"},
		{&net.TCPAddr{IP: net.ParseIP("2001:db8:1:2:ffff::1"), Port: 443}, "2001:db8:1:2::/64"},
		{&net.UnixAddr{Name: "/run/tampd.sock", Net: "unix"}, "/run/tampd.sock"},
	} {
		ctx := peer.NewContext(context.Background(), &peer.Peer{Addr: tc.addr})
		if got := callerAddress(ctx); got != tc.want {
			t.Errorf("callerAddress(%v) = %q, want %q", tc.addr, got, tc.want)
		}
	}
}

// The attempts of at most max addresses are tracked: beyond them, while
// every tracked bucket holds failures, new addresses share one overflow
// bucket; a full bucket is forgotten when room is needed.
func TestAttemptsBoundTheAddressesTracked(t *testing.T) {
	now := time.Unix(1_800_000_000, 0)
	a := newAttempts(0.1, 2)
	a.max = 3
	for _, addr := range []string{"192.0.2.1", "192.0.2.2", "192.0.2.3"} {
		if key, ok, _, _ := a.take(addr, now); !ok || key != addr {
			t.Fatalf("take(%s) = %q, %v; want its own bucket", addr, key, ok)
		}
	}
	for i, want := range []bool{true, true, false} {
		key, ok, wait, _ := a.take("192.0.2.4", now)
		if key != overflowAddress || ok != want {
			t.Fatalf("take %d from a fourth address = %q, %v; want %q, %v", i+1, key, ok, overflowAddress, want)
		}
		if !ok && wait != 10*time.Second {
			t.Errorf("wait = %v, want 10s", wait)
		}
	}
	if key, ok, _, _ := a.take("192.0.2.5", now); key != overflowAddress || ok {
		t.Errorf("a fifth address = %q, %v; want the overflow bucket, empty", key, ok)
	}
	// A minute on, every bucket is full again: room is made by forgetting
	// them, and a new address has its own bucket.
	later := now.Add(time.Minute)
	if key, ok, _, _ := a.take("192.0.2.6", later); key != "192.0.2.6" || !ok {
		t.Errorf("a new address once the buckets refilled = %q, %v; want its own", key, ok)
	}
	if len(a.buckets) != 1 {
		t.Errorf("%d buckets kept, want 1", len(a.buckets))
	}
	// A call that does not fail gives its attempt back.
	key, _, _, _ := a.take("192.0.2.6", later)
	a.settle(key, false)
	if key, ok, _, _ := a.take("192.0.2.6", later); !ok {
		t.Errorf("take after a settled success = %q, %v; want an attempt left", key, ok)
	}
	// An empty bucket with attempts in flight says so (a call then waits
	// for them); one emptied by failures does not.
	b := newAttempts(0.1, 1)
	k, _, _, _ := b.take("198.51.100.1", later)
	if _, ok, _, busy := b.take("198.51.100.1", later); ok || !busy {
		t.Errorf("take while one is in flight = %v, busy %v; want refused and busy", ok, busy)
	}
	b.settle(k, true)
	if _, ok, _, busy := b.take("198.51.100.1", later); ok || busy {
		t.Errorf("take after a failure = %v, busy %v; want refused, not busy", ok, busy)
	}
}
