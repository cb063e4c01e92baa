package server_test

import (
	"crypto/ed25519"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/server"
)

// certSigner returns the device that signed an enrolment certificate: the
// server's own.
func certSigner(t *testing.T, cert *pb.Event) string {
	t.Helper()
	sg, err := ledger.FromEnvelope(cert)
	if err != nil {
		t.Fatal(err)
	}
	return sg.Event.Device
}

// ResumeDevice gives a new token only for a certificate this server signed
// and a fresh proof by the certificate's key, never to a revoked device; a
// proof cannot be used twice (issue 10, rule 6).
func TestResumeDeviceRefusals(t *testing.T) {
	c := startCluster(t, t.TempDir())
	p := c.newProject("Saltbush Draw culvert")
	ac := pb.NewAdminServiceClient(c.conn(""))
	ctx := t.Context()
	enrol := func(name string) (string, ed25519.PrivateKey, *pb.Event) {
		t.Helper()
		user, err := c.srv.AddUser(ctx, name, false)
		if err != nil {
			t.Fatal(err)
		}
		if err := c.srv.AddMember(ctx, p, user, server.Inspector); err != nil {
			t.Fatal(err)
		}
		code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
		if err != nil {
			t.Fatal(err)
		}
		pub, key, _ := ed25519.GenerateKey(nil)
		dev := newV7()
		resp, err := ac.EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: dev, PublicKey: pub})
		if err != nil {
			t.Fatal(err)
		}
		return dev, key, resp.GetCertificate()
	}
	dev, key, cert := enrol("Nell")
	srvDev := certSigner(t, cert)
	proof := func(k ed25519.PrivateKey, server, device string, at time.Time) *pb.ResumeDeviceRequest {
		return &pb.ResumeDeviceRequest{Certificate: cert, ProofMicros: at.UnixMicro(), Proof: ed25519.Sign(k, ledger.ResumeProof(server, device, at.UnixMicro()))}
	}
	_, otherKey, _ := ed25519.GenerateKey(nil)
	now := time.Now()

	// A ledger entry of the project (signed by the server, but for a
	// project) is no certificate.
	entries, err := c.store.After(ctx, p, 0, 100)
	if err != nil {
		t.Fatal(err)
	}
	var inLedger *pb.Event
	for _, e := range entries {
		sg, _ := ledger.Decode(e.Event)
		if k, ok := sg.Event.Kind.(*ledger.DeviceEnrolled); ok && k.DeviceID == dev {
			inLedger = sg.Proto()
		}
	}
	if inLedger == nil {
		t.Fatal("the project's ledger does not introduce the enrolled device")
	}
	fromLedger := proof(key, srvDev, dev, now)
	fromLedger.Certificate = inLedger

	for name, req := range map[string]*pb.ResumeDeviceRequest{
		"another key":          proof(otherKey, srvDev, dev, now),
		"another server":       proof(key, newV7(), dev, now),
		"a stale proof":        proof(key, srvDev, dev, now.Add(-time.Hour)),
		"a ledger entry":       fromLedger,
		"a forged certificate": {Certificate: &pb.Event{Body: cert.GetBody(), Signature: make([]byte, 64)}, ProofMicros: now.UnixMicro(), Proof: proof(key, srvDev, dev, now).GetProof()},
	} {
		if _, err := ac.ResumeDevice(ctx, req); status.Code(err) != codes.Unauthenticated {
			t.Errorf("resume with %s: %v, want Unauthenticated", name, err)
		}
	}

	good := proof(key, srvDev, dev, now)
	if _, err := ac.ResumeDevice(ctx, good); err != nil {
		t.Fatalf("resume with a good proof: %v", err)
	}
	if _, err := ac.ResumeDevice(ctx, good); status.Code(err) != codes.Unauthenticated {
		t.Errorf("the same proof again: %v, want Unauthenticated", err)
	}

	root := c.rawDevice(t, "root", nil, true)
	if _, err := ac.RevokeDevice(root.ctx(), &pb.RevokeDeviceRequest{DeviceId: dev, Reason: "tablet stolen"}); err != nil {
		t.Fatal(err)
	}
	if _, err := ac.ResumeDevice(ctx, proof(key, srvDev, dev, now.Add(time.Second))); status.Code(err) != codes.PermissionDenied {
		t.Errorf("resume of a revoked device: %v, want PermissionDenied", err)
	}
}

// A device the server learned from the ledger has no token until it proves
// its key, and the server's own device has none at all: no bearer token
// reaches either (review of issue 10: their stand-in hashes were of
// guessable strings).
func TestDevicesWithoutTokensRefuseEveryToken(t *testing.T) {
	c := startCluster(t, t.TempDir())
	p := c.newProject("Saltbush Draw culvert")
	c.rawDevice(t, "member", map[string]server.Role{p: server.Inspector}, false) // its enrolment makes an entry of the server's own
	pub, _, _ := ed25519.GenerateKey(nil)
	lost := newV7()
	user, err := c.srv.AddUser(t.Context(), "Lem", false)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := c.store.RegisterDevice(t.Context(), server.Device{ID: lost, UserID: user, PublicKey: pub}, "Lem", time.Now()); err != nil {
		t.Fatal(err)
	}
	own := ""
	entries, _ := c.store.After(t.Context(), p, 0, 100)
	for _, e := range entries {
		if sg, err := ledger.Decode(e.Event); err == nil && ledger.ServerMade(sg.Event.Kind) {
			own = sg.Event.Device
		}
	}
	if own == "" {
		t.Fatal("no entry of the server's own in the project's ledger")
	}
	for _, token := range []string{"", "no token yet: " + lost, "no token: the server's own device " + own, lost, own} {
		d := &rawDevice{token: token}
		_, err := pb.NewAdminServiceClient(c.conn("")).ListMembers(d.ctx(), &pb.ListMembersRequest{ProjectId: p})
		if status.Code(err) != codes.Unauthenticated {
			t.Errorf("token %q: %v, want Unauthenticated", token, err)
		}
	}
}
