package pgstore

import (
	"context"
	"errors"
	"fmt"
	"iter"
	"time"

	"github.com/jackc/pgx/v5"

	"tamp/internal/ledger"
	"tamp/server"
)

// ErrNotEmpty is returned (wrapped) by Load for a database that holds a
// user or a project already.
var ErrNotEmpty = errors.New("pgstore: the database is not empty")

// Loaded is what Load copied and verified.
type Loaded struct {
	// Projects are the projects, each with its head as verified: the chain
	// recomputed from the genesis over the copied rows.
	Projects []server.DumpProject
	// How many rows of the other tables it copied, and whether the
	// server's identity.
	Users, Devices, Codes, Members, Invitations int
	Identity                                    bool
}

// Load copies a store's contents into this store's database, which must be
// empty: d, and each project's ledger rows as rows yields them (in order of
// sequence number). It fails with ErrNotEmpty, changing nothing, when the
// database holds a user (the server's own too) or a project.
//
// Everything goes in one transaction, which commits only after every
// project's copied rows were read back and their chain recomputed from the
// genesis (h(n) = SHA-256(h(n-1) || n || event bytes)) to the head d names,
// with as many rows as d counts, and each other table holds as many rows as
// d has: on any difference nothing stays.
func (s *Store) Load(ctx context.Context, d server.Dump, rows func(project string) iter.Seq2[server.Row, error]) (Loaded, error) {
	out := Loaded{Users: len(d.Users), Devices: len(d.Devices), Codes: len(d.Codes), Members: len(d.Members),
		Invitations: len(d.Invitations), Identity: d.Identity != nil}
	err := pgx.BeginFunc(ctx, s.pool, func(tx pgx.Tx) error {
		// Hold off a tampd init or serve on the same database meanwhile.
		if _, err := tx.Exec(ctx, `LOCK TABLE users, projects, server_identity IN SHARE ROW EXCLUSIVE MODE`); err != nil {
			return err
		}
		var users, projects int
		if err := tx.QueryRow(ctx, `SELECT (SELECT count(*) FROM users), (SELECT count(*) FROM projects)`).Scan(&users, &projects); err != nil {
			return err
		}
		if users > 0 || projects > 0 {
			return fmt.Errorf("%w: it holds %d users (the server's own included) and %d projects; a ledger is copied into an empty database only (create a new one)",
				ErrNotEmpty, users, projects)
		}
		if err := copyRows(ctx, tx, "users", []string{"user_id", "name", "server_admin", "created_at"}, d.Users,
			func(u server.DumpUser) []any { return []any{u.ID, u.Name, u.ServerAdmin, u.Created} }); err != nil {
			return err
		}
		if err := copyRows(ctx, tx, "projects", []string{"project_id", "name", "epoch", "head_seq", "head_hash", "created_at"}, d.Projects,
			func(p server.DumpProject) []any {
				return []any{p.Head.Project, p.Name, int64(p.Head.Epoch), int64(p.Head.Seq), p.Head.Hash[:], p.Created}
			}); err != nil {
			return err
		}
		if err := copyRows(ctx, tx, "devices", []string{"device_id", "user_id", "name", "public_key", "token_hash", "enrolled_at", "revoked_at"}, d.Devices,
			func(v server.DumpDevice) []any {
				var token []byte // NULL: no token finds the device
				if len(v.TokenHash) > 0 {
					token = v.TokenHash
				}
				return []any{v.ID, v.UserID, v.Name, []byte(v.PublicKey), token, v.Enrolled, orNull(v.RevokedAt)}
			}); err != nil {
			return err
		}
		if err := copyRows(ctx, tx, "enrollment_codes", []string{"code_hash", "user_id", "expires_at", "used_at"}, d.Codes,
			func(c server.DumpCode) []any { return []any{c.Hash, c.User, c.Expires, orNull(c.Used)} }); err != nil {
			return err
		}
		if err := copyRows(ctx, tx, "members", []string{"project_id", "user_id", "role"}, d.Members,
			func(m server.DumpMember) []any { return []any{m.Project, m.User, string(m.Role)} }); err != nil {
			return err
		}
		if err := copyRows(ctx, tx, "invitations",
			[]string{"invitation_id", "project_id", "user_id", "role", "invited_by", "created_at", "state", "resolved_at"}, d.Invitations,
			func(i server.DumpInvitation) []any {
				return []any{i.ID, i.Project, i.User, string(i.Role), i.InvitedBy, i.Created, i.State, orNull(i.Resolved)}
			}); err != nil {
			return err
		}
		if d.Identity != nil {
			if _, err := tx.Exec(ctx, `INSERT INTO server_identity (id, device_id, user_id, private_key) VALUES (1, $1, $2, $3)`,
				d.Identity.DeviceID, d.Identity.UserID, d.Identity.Seed); err != nil {
				return fmt.Errorf("the server's identity: %w", err)
			}
		}
		for _, p := range d.Projects {
			if err := copyLedger(ctx, tx, p.Head.Project, rows(p.Head.Project)); err != nil {
				return err
			}
		}
		for _, p := range d.Projects {
			got, err := verifyLedger(ctx, tx, p)
			if err != nil {
				return err
			}
			out.Projects = append(out.Projects, got)
		}
		return checkCounts(ctx, tx, d)
	})
	if err != nil {
		return Loaded{}, fmt.Errorf("pgstore: load: %w", fault(err))
	}
	return out, nil
}

// orNull is t, or NULL for the zero time.
func orNull(t time.Time) *time.Time {
	if t.IsZero() {
		return nil
	}
	return &t
}

// copyRows copies items into table with COPY.
func copyRows[T any](ctx context.Context, tx pgx.Tx, table string, columns []string, items []T, values func(T) []any) error {
	n, err := tx.CopyFrom(ctx, pgx.Identifier{table}, columns, pgx.CopyFromSlice(len(items), func(i int) ([]any, error) {
		return values(items[i]), nil
	}))
	if err != nil {
		return fmt.Errorf("copy %s: %w", table, err)
	}
	if n != int64(len(items)) {
		return fmt.Errorf("copy %s: %d of %d rows copied", table, n, len(items))
	}
	return nil
}

// copyLedger copies a project's ledger rows with COPY, as rows yields them.
func copyLedger(ctx context.Context, tx pgx.Tx, project string, rows iter.Seq2[server.Row, error]) error {
	next, stop := iter.Pull2(rows)
	defer stop()
	src := &ledgerSource{project: project, next: next}
	_, err := tx.CopyFrom(ctx, pgx.Identifier{"ledger"}, []string{"project_id", "seq", "event_id", "device_id", "device_seq", "kind",
		"record_id", "envelope", "hash", "clock_skew_micros", "received_at"}, src)
	if err == nil {
		err = src.err
	}
	if err != nil {
		return fmt.Errorf("copy the ledger of %s: %w", project, err)
	}
	return nil
}

// ledgerSource is a pgx.CopyFromSource over a sequence of ledger rows.
type ledgerSource struct {
	project string
	next    func() (server.Row, error, bool)
	row     server.Row
	err     error
}

func (s *ledgerSource) Next() bool {
	if s.err != nil {
		return false
	}
	row, err, ok := s.next()
	if !ok {
		return false
	}
	if err != nil {
		s.err = err
		return false
	}
	s.row = row
	return true
}

func (s *ledgerSource) Values() ([]any, error) {
	r := &s.row
	return []any{s.project, int64(r.Seq), r.EventID, r.DeviceID, int64(r.DeviceSeq), r.Kind, r.RecordID, r.Envelope, r.Hash[:],
		r.SkewMicros, r.Received}, nil
}

func (s *ledgerSource) Err() error { return s.err }

// verifyLedger reads a project's copied rows back and recomputes its chain
// from the genesis: the rows must be 1, 2, ... with each hash following
// from the one before and the event's bytes, end at the head the source
// named, number as many as it counted, and the project's copied head must
// be that head.
func verifyLedger(ctx context.Context, tx pgx.Tx, want server.DumpProject) (server.DumpProject, error) {
	id := want.Head.Project
	v := ledger.NewVerifier(ledger.Start(id, want.Head.Epoch))
	rows, err := tx.Query(ctx, `SELECT seq, envelope, hash FROM ledger WHERE project_id = $1 ORDER BY seq`, id)
	if err != nil {
		return want, err
	}
	var n uint64
	var seq int64
	var env, h []byte
	batch := make([]ledger.Entry, 1)
	_, err = pgx.ForEachRow(rows, []any{&seq, &env, &h}, func() error {
		n++
		batch[0] = ledger.Entry{Seq: uint64(seq), Event: env}
		copy(batch[0].Hash[:], h)
		return v.Verify(batch)
	})
	if err != nil {
		return want, fmt.Errorf("verify the copied chain of project %s: %w", id, err)
	}
	got := v.At()
	if got.Seq != want.Head.Seq || server.Hash(got.Hash) != want.Head.Hash {
		return want, fmt.Errorf("verify the copied chain of project %s: it recomputes to %d %s, the source's head is %d %s",
			id, got.Seq, server.Hash(got.Hash), want.Head.Seq, want.Head.Hash)
	}
	if n != want.Rows {
		return want, fmt.Errorf("verify project %s: %d rows copied, the source has %d", id, n, want.Rows)
	}
	var head server.Checkpoint
	var hh []byte
	if err := tx.QueryRow(ctx, `SELECT epoch, head_seq, head_hash FROM projects WHERE project_id = $1`, id).Scan(&head.Epoch, &head.Seq, &hh); err != nil {
		return want, err
	}
	head.Project = id
	copy(head.Hash[:], hh)
	if head != want.Head {
		return want, fmt.Errorf("verify project %s: its copied head is %d/%d %s, the source's %d/%d %s",
			id, head.Epoch, head.Seq, head.Hash, want.Head.Epoch, want.Head.Seq, want.Head.Hash)
	}
	want.Rows = n
	return want, nil
}

// checkCounts compares each table's rows with the dump's.
func checkCounts(ctx context.Context, tx pgx.Tx, d server.Dump) error {
	identity := 0
	if d.Identity != nil {
		identity = 1
	}
	for _, c := range []struct {
		table string
		want  int
	}{
		{"projects", len(d.Projects)}, {"users", len(d.Users)}, {"devices", len(d.Devices)}, {"enrollment_codes", len(d.Codes)},
		{"members", len(d.Members)}, {"invitations", len(d.Invitations)}, {"server_identity", identity},
	} {
		var n int
		if err := tx.QueryRow(ctx, `SELECT count(*) FROM `+pgx.Identifier{c.table}.Sanitize()).Scan(&n); err != nil {
			return err
		}
		if n != c.want {
			return fmt.Errorf("verify: %s holds %d rows, the source has %d", c.table, n, c.want)
		}
	}
	return nil
}
