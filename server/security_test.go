package server_test

import (
	"context"
	"crypto/ecdsa"
	"crypto/ed25519"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/pem"
	"errors"
	"math/big"
	"net"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/google/uuid"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/soil"
	"tamp/server"
)

// rawDevice is a device whose key the test holds, to sign events of any
// kind and author.
type rawDevice struct {
	id, user, token string
	key             ed25519.PrivateKey
	seq             uint64
}

func (c *cluster) rawDevice(t testing.TB, name string, roles map[string]server.Role, serverAdmin bool) *rawDevice {
	t.Helper()
	ctx := context.Background()
	user, err := c.srv.AddUser(ctx, name, serverAdmin)
	if err != nil {
		t.Fatal(err)
	}
	for project, role := range roles {
		if err := c.srv.AddMember(ctx, project, user, role); err != nil {
			t.Fatal(err)
		}
	}
	code, _, err := c.srv.IssueEnrollmentCode(ctx, user)
	if err != nil {
		t.Fatal(err)
	}
	pub, key, _ := ed25519.GenerateKey(nil)
	d := &rawDevice{id: uuid.Must(uuid.NewV7()).String(), user: user, key: key}
	resp, err := pb.NewAdminServiceClient(c.conn("")).EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: d.id, PublicKey: pub})
	if err != nil {
		t.Fatal(err)
	}
	d.token = resp.GetToken()
	return d
}

func newV7() string { return uuid.Must(uuid.NewV7()).String() }

func (d *rawDevice) ctx() context.Context {
	return metadata.AppendToOutgoingContext(context.Background(), "authorization", "Bearer "+d.token)
}

func (d *rawDevice) sign(t testing.TB, project string, k ledger.Kind) ledger.Signed {
	t.Helper()
	d.seq++
	s, err := ledger.Seal(ledger.Event{ID: uuid.Must(uuid.NewV7()).String(), Project: project, Author: d.user, Device: d.id, DeviceSeq: d.seq,
		HLC: ledger.HLC{Wall: time.Now().UnixMicro()}, DeviceTime: time.Now().UTC().Truncate(time.Microsecond), Kind: k}, d.key)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func (d *rawDevice) push(t *testing.T, c *cluster, project string, evs ...ledger.Signed) (*pb.PushResponse, error) {
	t.Helper()
	return pb.NewSyncServiceClient(c.conn("")).Push(d.ctx(), pushRequest(project, evs))
}

// first pushes events and returns the first one's outcome.
func (d *rawDevice) first(t *testing.T, c *cluster, project string, evs ...ledger.Signed) *pb.PushOutcome {
	t.Helper()
	resp, err := d.push(t, c, project, evs...)
	if err != nil {
		t.Fatalf("push: %v", err)
	}
	return resp.GetOutcomes()[0]
}

// Every role against every kind of entry, on its own project and on another.
func TestRolesAgainstEntries(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("project A")
	b := c.newProject("project B")
	c.project = a
	ctx := context.Background()
	// Reference records on A that the entries refer to, made by an admin and a QA member.
	adm := c.rawDevice(t, "admin", map[string]server.Role{a: server.Admin}, false)
	qa := c.rawDevice(t, "qa", map[string]server.Role{a: server.QA}, false)
	insp := c.rawDevice(t, "insp", map[string]server.Role{a: server.Inspector}, false)
	gauge, borrow, place := uuid.Must(uuid.NewV7()).String(), uuid.Must(uuid.NewV7()).String(), uuid.Must(uuid.NewV7()).String()
	test := &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12)}}
	for _, ev := range []struct {
		d *rawDevice
		k ledger.Kind
	}{
		{adm, &ledger.ProjectSetUp{Name: "A", Units: soil.US}},
		{qa, &ledger.EquipmentRegistered{ID: gauge, Kind: ledger.NuclearGauge, SerialNumber: "G-1"}},
		{qa, &ledger.BorrowSourceMeasured{ID: borrow, Name: "pit", BankTests: []ledger.Readings{sandCone(100, 9)}}},
		{insp, test},
	} {
		if o := ev.d.first(t, c, a, ev.d.sign(t, a, ev.k)); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Fatalf("set-up entry %s: %v", ev.k.KindName(), o)
		}
	}
	var testEvent string
	_ = c.srv.Inspect(ctx, a, func(p *ledger.Projection) { tt, _ := p.Test(test.TestID); testEvent = tt.Current })

	entries := map[string]func() ledger.Kind{
		"project_set_up": func() ledger.Kind { return &ledger.ProjectSetUp{Name: "A", Units: soil.SI} },
		"spec_defined": func() ledger.Kind {
			return &ledger.SpecDefined{ID: uuid.Must(uuid.NewV7()).String(), Name: "s", MinCompaction: "95"}
		},
		"reference_added": func() ledger.Kind {
			return &ledger.ReferenceAdded{ID: uuid.Must(uuid.NewV7()).String(), Procedure: soil.Procedure{Standard: soil.ASTMD698, Method: "A"}, MaxDryDensity: 1850, OptimumMoisture: 13}
		},
		"equipment_registered": func() ledger.Kind {
			return &ledger.EquipmentRegistered{ID: uuid.Must(uuid.NewV7()).String(), Kind: ledger.NuclearGauge, SerialNumber: "G-2"}
		},
		"standard_count_recorded": func() ledger.Kind {
			return &ledger.StandardCountRecorded{EquipmentID: gauge, Date: "2026-12-01", DensityCount: 2800, MoistureCount: 700, Accepted: true}
		},
		"moisture_correction_set": func() ledger.Kind {
			return &ledger.MoistureCorrectionSet{ID: uuid.Must(uuid.NewV7()).String(), EquipmentID: gauge, ReferenceID: borrow,
				Correction: soil.MoistureCorrection{Kind: soil.Offset, Value: 1}}
		},
		"borrow_source_measured": func() ledger.Kind {
			return &ledger.BorrowSourceMeasured{ID: uuid.Must(uuid.NewV7()).String(), Name: "pit 2", BankTests: []ledger.Readings{sandCone(100, 9)}}
		},
		"lift_placement_recorded": func() ledger.Kind {
			return &ledger.LiftPlacementRecorded{ID: place, Feature: "pad", Thickness: 0.2, CompactedVolume: 100}
		},
		"haul_recorded": func() ledger.Kind {
			return &ledger.HaulRecorded{ID: uuid.Must(uuid.NewV7()).String(), BorrowSourceID: borrow, Loads: 3, LooseVolumePerLoad: 10}
		},
		"test_recorded": func() ledger.Kind {
			return &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12)}}
		},
		"test_corrected": func() ledger.Kind {
			return &ledger.TestCorrected{TestID: test.TestID, Supersedes: testEvent, Reason: "typo", Content: test.Content}
		},
		"test_voided": func() ledger.Kind { return &ledger.TestVoided{TestID: test.TestID, Reason: "wrong lift"} },
		"test_reviewed": func() ledger.Kind {
			return &ledger.TestReviewed{TestID: test.TestID, Revision: testEvent, Decision: ledger.Approve}
		},
	}
	roles := []server.Role{server.Inspector, server.Office, server.QA, server.Admin}
	members := map[server.Role]*rawDevice{}
	for _, r := range roles {
		members[r] = c.rawDevice(t, "member-"+string(r), map[string]server.Role{a: r}, false)
	}
	outsider := c.rawDevice(t, "outsider", map[string]server.Role{b: server.Admin}, false)
	for kind, make := range entries {
		allowed := server.EntryRoles(kind)
		for _, r := range roles {
			want := false
			for _, x := range allowed {
				want = want || x == r
			}
			rule := "role_may_make_entry"
			if kind == "test_corrected" || kind == "test_voided" {
				if want {
					rule = "own_tests_only" // the test belongs to another inspector
				}
				want = false
			}
			t.Run(kind+"/"+string(r), func(t *testing.T) {
				d := members[r]
				o := d.first(t, c, a, d.sign(t, a, make()))
				got := o.GetStatus() == pb.PushStatus_PUSH_STATUS_ACCEPTED
				if got != want {
					t.Errorf("%s by %s: %v %s, want allowed=%v", kind, r, o.GetStatus(), o.GetMessage(), want)
				}
				if !got && (o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != rule || o.GetField() != "") {
					t.Errorf("%s by %s: refused for %v, rule %q, field %q, want permission denied by rule %s", kind, r, o.GetReason(), o.GetRule(), o.GetField(), rule)
				}
			})
		}
		// A member of B pushing to A is refused outright.
		t.Run(kind+"/member of B to A", func(t *testing.T) {
			_, err := outsider.push(t, c, a, outsider.sign(t, a, make()))
			if reason, _, rule := reasonOf(err); status.Code(err) != codes.PermissionDenied || reason != "NOT_A_MEMBER" || rule != "member_of_project" {
				t.Errorf("outsider push: %v", err)
			}
		})
	}
	// The author's own correction and void are allowed.
	if o := insp.first(t, c, a, insp.sign(t, a, entries["test_corrected"]())); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Errorf("own correction: %v", o)
	}

	// Administration calls by role.
	adminCalls := []struct {
		name string
		call func(d *rawDevice) error
		who  map[string]bool // which callers may
	}{
		{"create project", func(d *rawDevice) error {
			_, err := pb.NewAdminServiceClient(c.conn("")).CreateProject(d.ctx(), &pb.CreateProjectRequest{Name: "C"})
			return err
		}, map[string]bool{"server-admin": true}},
		{"add member", func(d *rawDevice) error {
			_, err := pb.NewAdminServiceClient(c.conn("")).AddMember(d.ctx(), &pb.AddMemberRequest{ProjectId: a, UserName: "new", Role: pb.Role_ROLE_INSPECTOR})
			return err
		}, map[string]bool{"server-admin": true, "admin": true}},
		{"list members", func(d *rawDevice) error {
			_, err := pb.NewAdminServiceClient(c.conn("")).ListMembers(d.ctx(), &pb.ListMembersRequest{ProjectId: a})
			return err
		}, map[string]bool{"server-admin": true, "admin": true, "qa": true, "office": true, "inspector": true}},
		{"issue code", func(d *rawDevice) error {
			_, err := pb.NewAdminServiceClient(c.conn("")).IssueEnrollmentCode(d.ctx(), &pb.IssueEnrollmentCodeRequest{UserId: insp.user})
			return err
		}, map[string]bool{"server-admin": true, "admin": true}},
		{"list all devices", func(d *rawDevice) error {
			_, err := pb.NewAdminServiceClient(c.conn("")).ListDevices(d.ctx(), &pb.ListDevicesRequest{})
			return err
		}, map[string]bool{"server-admin": true}},
		{"revoke another's device", func(d *rawDevice) error {
			victim := c.rawDevice(t, "victim-"+d.user[:8], map[string]server.Role{a: server.Inspector}, false)
			_, err := pb.NewAdminServiceClient(c.conn("")).RevokeDevice(d.ctx(), &pb.RevokeDeviceRequest{DeviceId: victim.id})
			return err
		}, map[string]bool{"server-admin": true}},
	}
	callers := map[string]*rawDevice{"server-admin": c.rawDevice(t, "root", nil, true), "outsider": outsider}
	for _, r := range roles {
		callers[string(r)] = members[r]
	}
	for _, call := range adminCalls {
		for who, d := range callers {
			t.Run("admin/"+call.name+"/"+who, func(t *testing.T) {
				err := call.call(d)
				if call.who[who] != (err == nil) {
					t.Errorf("%s by %s: %v, want allowed=%v", call.name, who, err, call.who[who])
				}
				if err != nil && status.Code(err) != codes.PermissionDenied {
					t.Errorf("%s by %s: code %v, want PermissionDenied", call.name, who, status.Code(err))
				}
			})
		}
	}
}

func TestRefusals(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("project A")
	ctx := context.Background()
	admin := pb.NewAdminServiceClient(c.conn(""))
	user, _ := c.srv.AddUser(ctx, "ivy", false)
	if err := c.srv.AddMember(ctx, a, user, server.Inspector); err != nil {
		t.Fatal(err)
	}
	pub, _, _ := ed25519.GenerateKey(nil)
	code, _, _ := c.srv.IssueEnrollmentCode(ctx, user)
	if _, err := admin.EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: uuid.Must(uuid.NewV7()).String(), PublicKey: pub}); err != nil {
		t.Fatal(err)
	}
	t.Run("replayed code", func(t *testing.T) {
		_, err := admin.EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: code, DeviceId: uuid.Must(uuid.NewV7()).String(), PublicKey: pub})
		if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unauthenticated || reason != "CODE_INVALID" {
			t.Errorf("replayed code: %v", err)
		}
	})
	t.Run("expired code", func(t *testing.T) {
		c2 := &cluster{tb: t, dir: t.TempDir()}
		c2.start("")
		past := time.Now().Add(-25 * time.Hour)
		u, _ := c2.srv.AddUser(ctx, "old", false)
		// A code issued 25 hours ago has lapsed.
		if err := c2.store.AddEnrollmentCode(ctx, hashOf("stale-code"), u, past.Add(24*time.Hour)); err != nil {
			t.Fatal(err)
		}
		_, err := pb.NewAdminServiceClient(c2.conn("")).EnrollDevice(ctx, &pb.EnrollDeviceRequest{Code: "stale-code", DeviceId: uuid.Must(uuid.NewV7()).String(), PublicKey: pub})
		if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unauthenticated || reason != "CODE_INVALID" {
			t.Errorf("expired code: %v", err)
		}
	})
	t.Run("wrong token", func(t *testing.T) {
		bad := metadata.AppendToOutgoingContext(ctx, "authorization", "Bearer not-a-token")
		_, err := pb.NewSyncServiceClient(c.conn("")).Push(bad, &pb.PushRequest{ProjectId: a})
		if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unauthenticated || reason != "TOKEN_INVALID" {
			t.Errorf("wrong token: %v", err)
		}
	})
	d := c.rawDevice(t, "jo", map[string]server.Role{a: server.Inspector}, false)
	other := c.rawDevice(t, "kim", map[string]server.Role{a: server.Inspector}, false)
	office := c.rawDevice(t, "lu", map[string]server.Role{a: server.Office}, false)
	t.Run("author not the enrolled user", func(t *testing.T) {
		s := d.sign(t, a, &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
		e := s.Event
		e.Author = other.user // claims kim wrote it, signed by jo's device
		forged, err := ledger.Seal(e, d.key)
		if err != nil {
			t.Fatal(err)
		}
		o := d.first(t, c, a, forged)
		if o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != "author_is_device_user" {
			t.Errorf("author not the enrolled user: %v", o)
		}
	})
	t.Run("signature by another device's key", func(t *testing.T) {
		s := d.sign(t, a, &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
		forged, err := ledger.Seal(s.Event, other.key) // claims jo's device, signed with kim's key
		if err != nil {
			t.Fatal(err)
		}
		o := d.first(t, c, a, forged)
		if o.GetReason() != pb.RejectReason_REJECT_REASON_BAD_SIGNATURE {
			t.Errorf("another device's key: %v", o)
		}
	})
	t.Run("review of one's own test", func(t *testing.T) {
		// Only inspectors record tests: kim records one, then is moved to
		// the office role and tries to review it.
		rec := other.sign(t, a, &ledger.TestRecorded{TestID: uuid.Must(uuid.NewV7()).String(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
		if o := other.first(t, c, a, rec); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Fatal(o)
		}
		if err := c.srv.AddMember(ctx, a, other.user, server.Office); err != nil {
			t.Fatal(err)
		}
		k := rec.Event.Kind.(*ledger.TestRecorded)
		o := other.first(t, c, a, other.sign(t, a, &ledger.TestReviewed{TestID: k.TestID, Revision: rec.Event.ID, Decision: ledger.Approve}))
		if o.GetReason() != pb.RejectReason_REJECT_REASON_PERMISSION_DENIED || o.GetRule() != "no_self_review" {
			t.Errorf("self review: %v", o)
		}
		o = office.first(t, c, a, office.sign(t, a, &ledger.TestReviewed{TestID: k.TestID, Revision: rec.Event.ID, Decision: ledger.Approve}))
		if o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
			t.Errorf("review by another office member: %v", o)
		}
	})
	t.Run("revoked device", func(t *testing.T) {
		if _, err := admin.RevokeDevice(d.ctx(), &pb.RevokeDeviceRequest{DeviceId: d.id, Reason: "tablet lost"}); err != nil {
			t.Fatal(err)
		}
		_, err := d.push(t, c, a)
		if reason, _, _ := reasonOf(err); status.Code(err) != codes.Unauthenticated || reason != "DEVICE_REVOKED" {
			t.Errorf("revoked device's token: %v", err)
		}
	})
	t.Run("batch too large", func(t *testing.T) {
		var evs []ledger.Signed
		for range 2001 {
			evs = append(evs, office.sign(t, a, &ledger.HaulRecorded{ID: uuid.Must(uuid.NewV7()).String(), BorrowSourceID: uuid.Must(uuid.NewV7()).String(), Loads: 1, LooseVolumePerLoad: 10}))
		}
		_, err := office.push(t, c, a, evs...)
		if status.Code(err) != codes.ResourceExhausted {
			t.Errorf("2001 events in one batch: %v", err)
		}
	})
}

// A revoked device is told so when it syncs; its pending entries stay.
func TestRevokedDeviceKeepsPending(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Sagebrush Flats pad")
	ann := c.device("ann", server.Inspector)
	record(t, ann, project, "", "", 2, 0)
	syncOK(t, ann, c.conn(""), project)
	record(t, ann, project, "", "", 3, 0)
	root := c.rawDevice(t, "root", nil, true)
	if _, err := pb.NewAdminServiceClient(c.conn("")).RevokeDevice(root.ctx(), &pb.RevokeDeviceRequest{DeviceId: ann.DeviceID()}); err != nil {
		t.Fatal(err)
	}
	_, err := ann.Sync(context.Background(), c.conn(""), project, client.SyncOptions{})
	if !errors.Is(err, client.ErrRevoked) {
		t.Fatalf("sync of a revoked device: %v", err)
	}
	if o, _ := ann.Outbox(context.Background()); o.Pending != 3 {
		t.Errorf("pending after revocation: %d, want 3", o.Pending)
	}
	if n := c.memberEntries(project); n != 2 {
		t.Errorf("server holds %d of ann's entries, want the 2 accepted before revocation", n)
	}
}

// TLS end to end, with a certificate made in the test.
func TestTLS(t *testing.T) {
	dir := t.TempDir()
	certFile, keyFile, caFile := writeCert(t, dir)
	st := startClusterTLS(t, certFile, keyFile)
	project := st.newProject("Sagebrush Flats pad")
	user, _ := st.srv.AddUser(context.Background(), "ann", false)
	_ = st.srv.AddMember(context.Background(), project, user, server.Inspector)
	code, _, _ := st.srv.IssueEnrollmentCode(context.Background(), user)
	s, err := client.Open(context.Background(), filepath.Join(dir, "ann.db"), client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	cc, err := client.Dial(st.addr, client.DialOptions{CAFile: caFile})
	if err != nil {
		t.Fatal(err)
	}
	defer cc.Close()
	if err := s.Enroll(context.Background(), cc, code, "tablet"); err != nil {
		t.Fatal(err)
	}
	if got := s.EnrolledProjects(); len(got) != 1 || got[0] != project {
		t.Errorf("enrolled projects %v", got)
	}
	record(t, s, project, "", "", 2, 0)
	if _, err := s.Sync(context.Background(), cc, project, client.SyncOptions{}); err != nil {
		t.Fatal(err)
	}
	// Without the CA the client refuses the server's certificate.
	plain, err := client.Dial(st.addr, client.DialOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer plain.Close()
	if _, err := s.Sync(context.Background(), plain, project, client.SyncOptions{MaxAttempts: 1}); !errors.Is(err, client.ErrCertificate) {
		t.Errorf("sync with an unknown CA: %v, want client.ErrCertificate", err)
	}
	if _, err := client.Dial("192.0.2.1:7420", client.DialOptions{Plaintext: true}); err == nil {
		t.Error("plaintext to a remote address allowed")
	}
}

func startClusterTLS(t *testing.T, certFile, keyFile string) *cluster {
	t.Helper()
	c := &cluster{tb: t, dir: t.TempDir()}
	creds, err := credentials.NewServerTLSFromFile(certFile, keyFile)
	if err != nil {
		t.Fatal(err)
	}
	c.extra = []grpc.ServerOption{grpc.Creds(creds)}
	c.start("")
	return c
}

// writeCert writes a CA and a server certificate for 127.0.0.1 signed by it.
func writeCert(t *testing.T, dir string) (certFile, keyFile, caFile string) {
	t.Helper()
	caKey, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	ca := &x509.Certificate{SerialNumber: big.NewInt(1), Subject: pkix.Name{CommonName: "tamp test CA"}, NotBefore: time.Now().Add(-time.Hour),
		NotAfter: time.Now().Add(time.Hour), IsCA: true, KeyUsage: x509.KeyUsageCertSign, BasicConstraintsValid: true}
	caDER, err := x509.CreateCertificate(rand.Reader, ca, ca, &caKey.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	caCert, _ := x509.ParseCertificate(caDER)
	key, _ := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	leaf := &x509.Certificate{SerialNumber: big.NewInt(2), Subject: pkix.Name{CommonName: "tampd"}, NotBefore: time.Now().Add(-time.Hour),
		NotAfter: time.Now().Add(time.Hour), IPAddresses: []net.IP{net.ParseIP("127.0.0.1")}, ExtKeyUsage: []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
		KeyUsage: x509.KeyUsageDigitalSignature}
	der, err := x509.CreateCertificate(rand.Reader, leaf, caCert, &key.PublicKey, caKey)
	if err != nil {
		t.Fatal(err)
	}
	keyDER, _ := x509.MarshalECPrivateKey(key)
	certFile, keyFile, caFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem"), filepath.Join(dir, "ca.pem")
	write := func(name, typ string, b []byte) {
		if err := os.WriteFile(name, pem.EncodeToMemory(&pem.Block{Type: typ, Bytes: b}), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	write(certFile, "CERTIFICATE", der)
	write(keyFile, "EC PRIVATE KEY", keyDER)
	write(caFile, "CERTIFICATE", caDER)
	return certFile, keyFile, caFile
}

// A device pushing faster than its rate is told to slow down.
func TestPushRateLimit(t *testing.T) {
	c := &cluster{tb: t, dir: t.TempDir(), rate: 3}
	c.start("")
	a := c.newProject("project A")
	d := c.rawDevice(t, "eager", map[string]server.Role{a: server.Inspector}, false)
	var limited error
	for range 10 {
		if _, err := d.push(t, c, a); err != nil {
			limited = err
			break
		}
	}
	if reason, _, rule := reasonOf(limited); status.Code(limited) != codes.ResourceExhausted || reason != "RATE_LIMITED" || rule != "push_rate" {
		t.Errorf("ten pushes at once with a rate of 3: %v, want ResourceExhausted", limited)
	}
}

// An event id already in the ledger, pushed again with other content, is
// refused rather than reported present.
func TestConflictingEventID(t *testing.T) {
	c := startCluster(t, t.TempDir())
	a := c.newProject("project A")
	d := c.rawDevice(t, "jo", map[string]server.Role{a: server.Inspector}, false)
	orig := d.sign(t, a, &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(110, 12)}})
	if o := d.first(t, c, a, orig); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ACCEPTED {
		t.Fatal(o)
	}
	e := orig.Event
	e.Kind = &ledger.TestRecorded{TestID: newV7(), Content: ledger.TestContent{Readings: sandCone(118, 12)}}
	other, err := ledger.Seal(e, d.key)
	if err != nil {
		t.Fatal(err)
	}
	if o := d.first(t, c, a, other); o.GetReason() != pb.RejectReason_REJECT_REASON_CONFLICTING_ID {
		t.Errorf("same id, other content: %v", o)
	}
	if o := d.first(t, c, a, orig); o.GetStatus() != pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT {
		t.Errorf("same event again: %v", o)
	}
}
