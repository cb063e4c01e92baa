package daemon

import (
	"bytes"
	"context"
	"database/sql"
	"errors"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"

	"tamp/client"
	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
	"tamp/internal/pgtest"
	"tamp/internal/soil"
	"tamp/server"
	"tamp/server/pgstore"
	"tamp/server/sqlitestore"
)

// site is a tampd serving a data directory (or a database) in-process and
// the connection of the test's devices to it.
type site struct {
	t    *testing.T
	cc   *grpc.ClientConn
	stop func() error
}

func openSite(t *testing.T, args ...string) *site {
	t.Helper()
	addr, stop := startServeOn(t, args...)
	cc, err := grpc.NewClient(addr, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	return &site{t: t, cc: cc, stop: stop}
}

func (s *site) close() {
	s.t.Helper()
	s.cc.Close()
	if err := s.stop(); err != nil {
		s.t.Errorf("shutdown: %v", err)
	}
}

// newDevice opens a device store of the test's own.
func newDevice(t *testing.T, name string) *client.Store {
	t.Helper()
	dev, err := client.Open(context.Background(), filepath.Join(t.TempDir(), name+".db"), client.Options{Durability: client.DurabilityNormal})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { dev.Close() })
	return dev
}

// adminCtx is a call context of dev: its token.
func adminCtx(t *testing.T, dev *client.Store) context.Context {
	t.Helper()
	ctx, err := dev.CallContext(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	return ctx
}

// initSQLite makes a data directory with tampd init and returns the first
// administrator's enrolment code.
func initSQLite(t *testing.T, dir string) string {
	t.Helper()
	var out bytes.Buffer
	if err := Run(context.Background(), []string{"init", "--data", dir, "--admin", "Marta Quill", "--code-only"}, &out, io.Discard); err != nil {
		t.Fatal(err)
	}
	return strings.TrimSpace(out.String())
}

// coneTest is a sand-cone test of dry density dry pcf at moisture w: sand
// of 99.0 pcf, 7.00 lb used, 0.53 lb in the cone (the readings of the
// server's tests).
func coneTest(project, spec, ref string, dry, w float64, lift uint32) client.TestInput {
	pcf := func(v float64) float64 { return v * soil.PoundPerCubicFoot }
	sd, used, cone := pcf(99.0), 7.00*soil.Pound, 0.53*soil.Pound
	mass := pcf(dry) * (1 + w/100) * (used - cone) / sd
	return client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Feature: "pad", LiftNumber: lift,
		Readings: client.Readings{SandCone: &client.SandCone{SandDensity: sd, SandUsed: used, ConeCorrection: cone, SoilMass: mass, Moisture: w}}}
}

func syncDev(t *testing.T, dev *client.Store, cc *grpc.ClientConn, project string) client.SyncReport {
	t.Helper()
	rep, err := dev.Sync(context.Background(), cc, project, client.SyncOptions{Sleep: func(time.Duration) {}})
	if err != nil {
		t.Fatalf("sync: %v", err)
	}
	return rep
}

// A SQLite-backed tampd with devices, tests, a revoked device, an unused
// enrolment code and a pending invitation is migrated into PostgreSQL;
// tampd serving the database then holds the same chains, the devices sync
// with the tokens they have, a new test is accepted, the revoked device is
// refused, the code enrols and the invitation is accepted, and the server's
// state agrees with the devices'.
func TestPostgresMigrateFromSQLite(t *testing.T) {
	dsn := pgtest.NewDatabase(t)
	ctx := context.Background()
	dir := t.TempDir()
	code := initSQLite(t, dir)

	old := openSite(t, "--data", dir)
	marta := newDevice(t, "marta")
	if err := marta.Enroll(ctx, old.cc, code, "Marta's laptop"); err != nil {
		t.Fatal(err)
	}
	actx := adminCtx(t, marta)
	adm := pb.NewAdminServiceClient(old.cc)
	mk := func(name string) string {
		r, err := adm.CreateProject(actx, &pb.CreateProjectRequest{Name: name})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetProjectId()
	}
	pad, road := mk("Cinder Butte pad"), mk("Gravel Knob haul road")
	member := func(project, name string, role pb.Role) (string, string) {
		t.Helper()
		r, err := adm.AddMember(actx, &pb.AddMemberRequest{ProjectId: project, UserName: name, Role: role})
		if err != nil {
			t.Fatal(err)
		}
		c, err := adm.IssueEnrollmentCode(actx, &pb.IssueEnrollmentCodeRequest{UserId: r.GetUserId()})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetUserId(), c.GetCode()
	}
	enrol := func(project, name string, role pb.Role) *client.Store {
		t.Helper()
		_, code := member(project, name, role)
		dev := newDevice(t, name)
		if err := dev.Enroll(ctx, old.cc, code, name+"'s tablet"); err != nil {
			t.Fatal(err)
		}
		return dev
	}
	quinn := enrol(pad, "quinn", pb.Role_ROLE_QA)
	ann := enrol(pad, "ann", pb.Role_ROLE_INSPECTOR)
	bo := enrol(pad, "bo", pb.Role_ROLE_INSPECTOR)
	cyUser, cyCode := member(road, "cy", pb.Role_ROLE_OFFICE) // enrols after the move, with this code

	if err := marta.SetUpProject(ctx, pad, client.ProjectSetUp{Name: "Cinder Butte pad", Units: client.USCustomary, WaterDensity: soil.Water624}); err != nil {
		t.Fatal(err)
	}
	syncDev(t, marta, old.cc, pad)
	spec, err := quinn.DefineSpec(ctx, pad, client.Spec{Name: "pad fill", MinCompaction: "95", MoistureLow: "-2", MoistureHigh: "2"})
	if err != nil {
		t.Fatal(err)
	}
	ref, err := quinn.AddReference(ctx, pad, client.Reference{Material: "crushed fines", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: 116 * soil.PoundPerCubicFoot, OptimumMoisture: 13.5})
	if err != nil {
		t.Fatal(err)
	}
	syncDev(t, quinn, old.cc, pad)
	for i := range 6 {
		if _, err := ann.RecordTest(ctx, coneTest(pad, spec, ref, 104+float64(i*2), 12.5, uint32(i%3+1))); err != nil {
			t.Fatal(err)
		}
	}
	for i := range 2 {
		if _, err := bo.RecordTest(ctx, coneTest(pad, spec, ref, 109, 13, uint32(i+1))); err != nil {
			t.Fatal(err)
		}
	}
	if rep := syncDev(t, ann, old.cc, pad); rep.Accepted != 6 {
		t.Errorf("ann's sync on SQLite: %+v, want 6 accepted", rep)
	}
	syncDev(t, bo, old.cc, pad)
	if _, err := adm.RevokeDevice(actx, &pb.RevokeDeviceRequest{DeviceId: bo.DeviceID(), Reason: "tablet lost"}); err != nil {
		t.Fatal(err)
	}
	for _, d := range []*client.Store{marta, quinn, ann} {
		syncDev(t, d, old.cc, pad)
	}
	syncDev(t, marta, old.cc, road)

	// tampd still serves the directory: migrate refuses to read it.
	err = Run(ctx, []string{"migrate", "--data", dir, "--to", dsn}, io.Discard, io.Discard)
	if err == nil || !strings.Contains(err.Error(), "stop the tampd serving it") {
		t.Errorf("migrate while tampd serves the directory: %v, want a refusal naming the running tampd", err)
	}
	old.close()

	// An invitation of cy to the pad, pending when the ledger moves; and
	// the heads the SQLite ledger ends at.
	file := filepath.Join(dir, "ledger.db")
	lite, err := sqlitestore.Open(ctx, file, sqlitestore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	invID, err := lite.Invite(ctx, server.Invitation{ID: "0190a1b2-c3d4-7e5f-8a9b-0c1d2e3f4a5b", Project: pad, User: cyUser, Role: server.QA,
		InvitedBy: martaUser(t, lite, marta), Created: time.Now()})
	if err != nil {
		t.Fatal(err)
	}
	heads := map[string]server.Checkpoint{}
	for _, p := range []string{pad, road} {
		if heads[p], err = lite.Head(ctx, p); err != nil {
			t.Fatal(err)
		}
	}
	lite.Close()
	if heads[pad].Seq < 10 {
		t.Fatalf("the pad's ledger holds %d entries before the move, want the set-up, 8 tests and the devices' entries", heads[pad].Seq)
	}

	before, err := os.ReadFile(file)
	if err != nil {
		t.Fatal(err)
	}
	var out bytes.Buffer
	if err := Run(ctx, []string{"migrate", "--data", dir, "--to", dsn}, &out, io.Discard); err != nil {
		t.Fatalf("migrate: %v", err)
	}
	if after, err := os.ReadFile(file); err != nil || !bytes.Equal(before, after) {
		t.Errorf("migrate changed the SQLite file (%v)", err)
	}
	t.Logf("migrate:\n%s", out.String())
	for _, want := range []string{pad, road, "devices: 5 (1 revoked)", "invitations: 1 (1 pending)", "1 unused and unexpired", "server identity: device"} {
		if !strings.Contains(out.String(), want) {
			t.Errorf("migrate printed no %q", want)
		}
	}

	pg, err := pgstore.Open(ctx, dsn, pgstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer pg.Close()
	for p, want := range heads {
		if got, err := pg.Head(ctx, p); err != nil || got != want {
			t.Errorf("project %s on PostgreSQL: head %+v, %v; on SQLite %+v", p, got, err, want)
		}
	}

	nu := openSite(t, "--store", dsn)
	defer nu.close()
	// The devices go on with the tokens they have.
	for name, d := range map[string]*client.Store{"marta": marta, "quinn": quinn, "ann": ann} {
		if _, err := d.Sync(ctx, nu.cc, pad, client.SyncOptions{Sleep: func(time.Duration) {}}); err != nil {
			t.Errorf("%s's sync with tampd on PostgreSQL: %v", name, err)
		}
	}
	if _, err := ann.RecordTest(ctx, coneTest(pad, spec, ref, 111, 12, 4)); err != nil {
		t.Fatal(err)
	}
	if rep := syncDev(t, ann, nu.cc, pad); rep.Accepted != 1 {
		t.Errorf("ann's new test on PostgreSQL: %+v, want 1 accepted", rep)
	}
	syncDev(t, quinn, nu.cc, pad)
	if _, err := bo.Sync(ctx, nu.cc, pad, client.SyncOptions{Sleep: func(time.Duration) {}}); !errors.Is(err, client.ErrRevoked) {
		t.Errorf("the revoked device's sync on PostgreSQL: %v, want ErrRevoked", err)
	}
	// cy enrols with the code issued on SQLite and accepts the invitation.
	cy := newDevice(t, "cy")
	if err := cy.Enroll(ctx, nu.cc, cyCode, "cy's tablet"); err != nil {
		t.Fatalf("enrol with a code issued before the move: %v", err)
	}
	cyAdm := pb.NewAdminServiceClient(nu.cc)
	cctx := adminCtx(t, cy)
	invs, err := cyAdm.ListInvitations(cctx, &pb.ListInvitationsRequest{})
	if err != nil || len(invs.GetInvitations()) != 1 || invs.GetInvitations()[0].GetInvitationId() != invID {
		t.Fatalf("cy's invitations after the move: %v, %v; want %s", invs.GetInvitations(), err, invID)
	}
	if _, err := cyAdm.AcceptInvitation(cctx, &pb.AcceptInvitationRequest{InvitationId: invID}); err != nil {
		t.Fatalf("accept the invitation: %v", err)
	}
	syncDev(t, cy, nu.cc, pad)

	// One chain, its head the devices' verified point, and the server's
	// state the devices'.
	head, err := pg.Head(ctx, pad)
	if err != nil {
		t.Fatal(err)
	}
	entries, err := pg.After(ctx, pad, 0, 1<<30)
	if err != nil {
		t.Fatal(err)
	}
	le := make([]ledger.Entry, len(entries))
	view := ledger.NewProjection(pad) // the ledger's state as a server loads it
	for i, e := range entries {
		le[i] = ledger.Entry{Seq: e.Seq, Event: e.Event, Hash: ledger.Hash(e.Hash)}
		sg, err := ledger.Decode(e.Event)
		if err != nil {
			t.Fatalf("entry %d on PostgreSQL: %v", e.Seq, err)
		}
		if _, err := view.Apply(sg); err != nil {
			t.Fatalf("entry %d on PostgreSQL: %v", e.Seq, err)
		}
	}
	v := ledger.NewVerifier(ledger.Start(pad, head.Epoch))
	if err := v.Verify(le); err != nil || v.At().Seq != head.Seq || server.Hash(v.At().Hash) != head.Hash {
		t.Errorf("the pad's chain on PostgreSQL: %v, verified to %d, head %d", err, v.At().Seq, head.Seq)
	}
	digest := view.Digest().String()
	for name, d := range map[string]*client.Store{"quinn": quinn, "ann": ann, "cy": cy} {
		syncDev(t, d, nu.cc, pad)
		st, err := d.Status(ctx, pad)
		if err != nil {
			t.Fatal(err)
		}
		if st.Verified.Seq != head.Seq || st.Verified.Hash != head.Hash.String() {
			t.Errorf("%s verified %d %s, the head on PostgreSQL is %d %s", name, st.Verified.Seq, st.Verified.Hash, head.Seq, head.Hash)
		}
		if d.Digest(pad) != digest {
			t.Errorf("%s's state of the pad differs from the server's on PostgreSQL", name)
		}
	}
	if n := len(ann.Today(pad)); n != 9 {
		t.Errorf("ann holds %d tests of today, want 9: her 7 and bo's 2 from before his revocation", n)
	}
}

// martaUser returns the user id of the administrator's device.
func martaUser(t *testing.T, st *sqlitestore.Store, dev *client.Store) string {
	t.Helper()
	d, err := st.Device(context.Background(), dev.DeviceID())
	if err != nil {
		t.Fatal(err)
	}
	return d.UserID
}

// migrate copies into an empty database only, and a ledger whose chain
// does not recompute to its head is not copied at all.
func TestPostgresMigrateRefuses(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	code := initSQLite(t, dir)
	s := openSite(t, "--data", dir)
	marta := newDevice(t, "marta")
	if err := marta.Enroll(ctx, s.cc, code, "Marta's laptop"); err != nil {
		t.Fatal(err)
	}
	r, err := pb.NewAdminServiceClient(s.cc).CreateProject(adminCtx(t, marta), &pb.CreateProjectRequest{Name: "Cinder Butte pad"})
	if err != nil {
		t.Fatal(err)
	}
	if err := marta.SetUpProject(ctx, r.GetProjectId(), client.ProjectSetUp{Name: "Cinder Butte pad", Units: client.USCustomary, WaterDensity: soil.Water624}); err != nil {
		t.Fatal(err)
	}
	syncDev(t, marta, s.cc, r.GetProjectId())
	s.close()

	full := pgtest.NewDatabase(t)
	if err := Run(ctx, []string{"init", "--store", full, "--admin", "Someone Else", "--code-only"}, io.Discard, io.Discard); err != nil {
		t.Fatal(err)
	}
	err = Run(ctx, []string{"migrate", "--data", dir, "--to", full}, io.Discard, io.Discard)
	if !errors.Is(err, pgstore.ErrNotEmpty) || !strings.Contains(err.Error(), "empty database only") {
		t.Errorf("migrate into an initialised database: %v, want ErrNotEmpty naming the rule", err)
	}

	// One event's bytes altered in the SQLite file: the copied chain does
	// not recompute, and the database is left empty.
	db, err := sql.Open("sqlite", "file:"+filepath.Join(dir, "ledger.db"))
	if err != nil {
		t.Fatal(err)
	}
	res, err := db.Exec(`UPDATE ledger SET envelope = envelope || x'00' WHERE seq = 1`)
	if err != nil {
		t.Fatal(err)
	}
	if n, _ := res.RowsAffected(); n != 1 {
		t.Fatalf("altered %d rows, want 1", n)
	}
	db.Close()
	empty := pgtest.NewDatabase(t)
	err = Run(ctx, []string{"migrate", "--data", dir, "--to", empty}, io.Discard, io.Discard)
	if !errors.Is(err, ledger.ErrChainBroken) {
		t.Errorf("migrate of an altered ledger: %v, want ErrChainBroken", err)
	}
	pg, err := pgstore.Open(ctx, empty, pgstore.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer pg.Close()
	if n, err := pg.CountUsers(ctx); err != nil || n != 0 {
		t.Errorf("after a failed migration the database holds %d users (%v), want none", n, err)
	}
	if _, err := pg.Head(ctx, r.GetProjectId()); !errors.Is(err, server.ErrNoProject) {
		t.Errorf("after a failed migration the project is there: %v", err)
	}
}

// migrate's flags: --data and a PostgreSQL --to, and a data directory that
// has a ledger.
func TestMigrateFlags(t *testing.T) {
	for _, tc := range []struct {
		args []string
		want string
	}{
		{[]string{"migrate", "--to", "postgres://u@h/db"}, "--data: required"},
		{[]string{"migrate", "--data", t.TempDir()}, "--to: must be a PostgreSQL URL"},
		{[]string{"migrate", "--data", t.TempDir(), "--to", "host=h dbname=db"}, "--to: must be a PostgreSQL URL"},
		{[]string{"migrate", "--data", t.TempDir(), "--to", "postgres://u@127.0.0.1:1/db"}, "no ledger there"},
	} {
		err := Run(context.Background(), tc.args, io.Discard, io.Discard)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("tampd %s: %v, want %q", strings.Join(tc.args, " "), err, tc.want)
		}
	}
}
