package client

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"slices"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// EnrolledProjects returns the projects the server listed at enrolment.
func (s *Store) EnrolledProjects() []string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return slices.Clone(s.enrolled)
}

func (s *Store) token(ctx context.Context) (string, error) {
	var t string
	if err := s.db.Reader().QueryRowContext(ctx, `SELECT token FROM device WHERE id = 1`).Scan(&t); err != nil {
		return "", fmt.Errorf("client: token: %w", err)
	}
	return t, nil
}

// Progress reports how far a sync has gone, for a progress bar.
type Progress struct {
	Phase  string `json:"phase"`  // "push" or "pull"
	Events int    `json:"events"` // events sent or received so far in this phase
	Bytes  int64  `json:"bytes"`  // their encoded size
	Total  int    `json:"total"`  // events to push (push phase; zero when unknown)
}

// SyncOptions configure Sync. The zero value is usable.
type SyncOptions struct {
	BatchSize   int                 // events per push (default 500)
	Progress    func(Progress)      // called after every batch and chunk
	MaxAttempts int                 // per call, retrying Unavailable (default 6)
	BaseDelay   time.Duration       // first retry delay (default 200 ms), doubling with jitter
	MaxDelay    time.Duration       // longest retry delay (default 5 s)
	Sleep       func(time.Duration) // waits between retries (until the context ends when nil); tests shorten it
}

func (o *SyncOptions) defaults() {
	if o.BatchSize <= 0 {
		o.BatchSize = 500
	}
	if o.MaxAttempts <= 0 {
		o.MaxAttempts = 6
	}
	if o.BaseDelay <= 0 {
		o.BaseDelay = 200 * time.Millisecond
	}
	if o.MaxDelay <= 0 {
		o.MaxDelay = 5 * time.Second
	}
}

// SyncReport says what a sync did.
type SyncReport struct {
	Accepted       int           `json:"accepted"`         // outcomes of pushed events
	AlreadyPresent int           `json:"already_present"`  // outcomes of pushed events
	Waiting        int           `json:"waiting"`          // outcomes of pushed events
	Rejected       int           `json:"rejected"`         // outcomes of pushed events
	Pulled         int           `json:"pulled"`           // other devices' entries received that the device did not hold, each once
	Head           Checkpoint    `json:"head"`             // the point of the server's ledger verified
	ClockSkew      time.Duration `json:"clock_skew_nanos"` // device clock minus server clock
	Repushed       int           `json:"repushed"`         // events pushed back that the server had lost (a fork, a new epoch, a restore)
	Supplied       int           `json:"supplied"`         // entries pushed because the server asked for them
	NewEpoch       uint64        `json:"new_epoch"`        // the server's new epoch, when it opened one
}

// SyncStatus is what a user interface shows about a project's sync.
type SyncStatus struct {
	LastSuccess time.Time  `json:"last_success"`
	LastAttempt time.Time  `json:"last_attempt"`
	LastError   string     `json:"last_error"`
	Verified    Checkpoint `json:"verified"` // the last point of the server's ledger this device verified
	Outbox      Outbox     `json:"outbox"`
	// Unconfirmed counts entries the server acknowledged that this device
	// has not yet seen in the ledger it verified; ServerLacks those it
	// found missing from the server's ledger.
	Unconfirmed int `json:"unconfirmed"`
	ServerLacks int `json:"server_lacks"`
	// Waiting counts this device's entries the server holds back until it
	// receives the records they refer to (they are part of Outbox.Pending
	// and are offered again at every sync).
	Waiting int `json:"waiting"`
	// ServerMissing lists entries the server asked for that this device
	// does not hold.
	ServerMissing []MissingEntry `json:"server_missing"`
	// LongWaiting lists entries that have waited longer than
	// Options.WaitLimit for records the server lacks.
	LongWaiting []WaitingEntry `json:"long_waiting"`
}

// MissingEntry names an entry by its device and device sequence number.
type MissingEntry struct {
	Device string `json:"device"`
	Seq    uint64 `json:"seq"`
}

// WaitingEntry is an entry the server holds back until it receives the
// records the entry refers to.
type WaitingEntry struct {
	EventID  string         `json:"event_id"`
	Kind     string         `json:"kind"`      // the entry's kind, e.g. test_recorded
	RecordID string         `json:"record_id"` // the test, spec... it concerns
	Since    time.Time      `json:"since"`
	For      []WaitedRecord `json:"for"`
}

// WaitedRecord is a record an entry waits for.
type WaitedRecord struct {
	ID   string `json:"id"`
	Kind string `json:"kind"` // the kind of the entry that makes it, when this device holds one; empty when unknown
}

// Status returns a project's sync status.
func (s *Store) Status(ctx context.Context, project string) (SyncStatus, error) {
	var st SyncStatus
	cp, err := s.checkpoint(ctx, project)
	if err != nil {
		return st, err
	}
	st.Verified = checkpointOf(cp)
	var ok, at int64
	err = s.db.Reader().QueryRowContext(ctx, `SELECT last_success_micros, last_attempt_micros, last_error FROM sync_state WHERE project_id = ?`, project).
		Scan(&ok, &at, &st.LastError)
	if err != nil && !errors.Is(err, sql.ErrNoRows) {
		return st, fmt.Errorf("client: sync status: %w", err)
	}
	if ok > 0 {
		st.LastSuccess = time.UnixMicro(ok).UTC()
	}
	if at > 0 {
		st.LastAttempt = time.UnixMicro(at).UTC()
	}
	var oldest sql.NullInt64
	if err := s.db.Reader().QueryRowContext(ctx, outboxStatusQuery, project).Scan(&st.Outbox.Pending, &st.Waiting, &oldest); err != nil {
		return st, fmt.Errorf("client: sync status: %w", err)
	}
	if oldest.Valid {
		st.Outbox.Oldest = time.UnixMicro(oldest.Int64).UTC()
	}
	if err := s.serverCopyStatus(ctx, project, &st); err != nil {
		return st, err
	}
	return st, nil
}

func (s *Store) checkpoint(ctx context.Context, project string) (ledger.Checkpoint, error) {
	cp := ledger.Checkpoint{Project: project}
	var h []byte
	err := s.db.Reader().QueryRowContext(ctx, `SELECT epoch, seq, hash FROM sync_state WHERE project_id = ?`, project).Scan(&cp.Epoch, &cp.Seq, &h)
	if errors.Is(err, sql.ErrNoRows) || len(h) == 0 {
		return ledger.Start(project, cp.Epoch), nil
	}
	if err != nil {
		return cp, fmt.Errorf("client: checkpoint: %w", err)
	}
	copy(cp.Hash[:], h)
	return cp, nil
}

func saveCheckpoint(ctx context.Context, tx *sql.Tx, cp ledger.Checkpoint) error {
	_, err := tx.ExecContext(ctx, `INSERT INTO sync_state (project_id, epoch, seq, hash) VALUES (?, ?, ?, ?)
		ON CONFLICT (project_id) DO UPDATE SET epoch = excluded.epoch, seq = excluded.seq, hash = excluded.hash`,
		cp.Project, cp.Epoch, cp.Seq, cp.Hash[:])
	return err
}

func (s *Store) noteAttempt(ctx context.Context, project string, syncErr error) error {
	now := s.now().UnixMicro()
	msg := ""
	if syncErr != nil {
		msg = syncErr.Error()
	}
	q := `INSERT INTO sync_state (project_id, last_attempt_micros, last_error) VALUES (?, ?, ?)
		ON CONFLICT (project_id) DO UPDATE SET last_attempt_micros = excluded.last_attempt_micros, last_error = excluded.last_error`
	if syncErr == nil {
		q = `INSERT INTO sync_state (project_id, last_attempt_micros, last_error, last_success_micros) VALUES (?, ?, ?, ?)
		ON CONFLICT (project_id) DO UPDATE SET last_attempt_micros = excluded.last_attempt_micros, last_error = '',
		last_success_micros = excluded.last_success_micros`
	}
	args := []any{project, now, msg}
	if syncErr == nil {
		args = append(args, now)
	}
	if _, err := s.db.Writer().ExecContext(ctx, q, args...); err != nil {
		return fmt.Errorf("client: record sync status: %w", err)
	}
	return nil
}

// retry runs call, retrying on Unavailable (and Aborted, which asks for the
// whole exchange again) with exponential backoff and jitter, until it
// succeeds, fails otherwise, or the context ends. A server certificate that
// failed verification (ErrCertificate) is never retried: waiting does not
// mend it.
func retry(ctx context.Context, o SyncOptions, call func() error) error {
	delay := o.BaseDelay
	sleep := o.Sleep
	if sleep == nil {
		sleep = func(d time.Duration) {
			t := time.NewTimer(d)
			defer t.Stop()
			select {
			case <-t.C:
			case <-ctx.Done():
			}
		}
	}
	var err error
	for attempt := 1; ; attempt++ {
		if err = call(); err == nil {
			return nil
		}
		c := status.Code(err)
		if (c != codes.Unavailable && c != codes.Aborted) || errors.Is(err, ErrCertificate) || attempt >= o.MaxAttempts {
			return err
		}
		if ctx.Err() != nil {
			return ctx.Err()
		}
		sleep(delay/2 + rand.N(delay/2+1))
		delay = min(2*delay, o.MaxDelay)
	}
}

// Sync pulls and verifies the project's ledger after the last verified
// point, pushes the project's outbox, and pulls again, applying what it
// receives to the project's view. Pulling first lets the device see a
// rolled-back or rewritten server before it pushes. A cut connection is
// retried with backoff; what was verified and applied before a cut is kept,
// so the next attempt resumes. When the server's ledger no longer holds the
// verified point, Sync pushes back everything the device holds and returns
// ErrFork; a revoked device gets ErrRevoked and keeps its pending entries.
// A server's refusal is a *ServerError, which errors.Is matches against
// ErrRevoked, ErrNotMember and the other errors of a server's reasons.
// Each push also offers again every entry the server acknowledged that the
// device has not seen in the chain it verified (a restored server may have
// lost it), and the entries the server asks for that the device holds.
func (s *Store) Sync(ctx context.Context, conn grpc.ClientConnInterface, project string, opts SyncOptions) (SyncReport, error) {
	opts.defaults()
	rep, err := s.sync(ctx, conn, project, opts)
	if s.resumable(err) && s.Resume(ctx, conn) == nil {
		rep, err = s.sync(ctx, conn, project, opts)
	}
	return rep, errors.Join(err, s.noteAttempt(context.WithoutCancel(ctx), project, err))
}

func (s *Store) sync(ctx context.Context, conn grpc.ClientConnInterface, project string, opts SyncOptions) (SyncReport, error) {
	var rep SyncReport
	ctx, err := s.CallContext(ctx)
	if err != nil {
		return rep, err
	}
	sc := pb.NewSyncServiceClient(conn)
	if err := s.pullPhase(ctx, sc, project, opts, &rep); err != nil {
		return rep, err
	}
	cp, err := s.checkpoint(ctx, project)
	if err != nil {
		return rep, err
	}
	if _, err := s.pushOutbox(ctx, sc, project, cp, opts, &rep); err != nil {
		return rep, err
	}
	return rep, s.pullPhase(ctx, sc, project, opts, &rep)
}

// pullPhase pulls the ledger's delta. When the server opened a new epoch
// it pushes back everything the device holds and verifies the new epoch from
// its start. When the server's ledger no longer holds the verified point, it
// refuses to pull over it: it pushes back everything, takes up the new epoch
// the server opens for it, and returns ErrFork.
func (s *Store) pullPhase(ctx context.Context, sc pb.SyncServiceClient, project string, opts SyncOptions, rep *SyncReport) error {
	var err error
	for range 3 {
		err = retry(ctx, opts, func() error { return s.pull(ctx, sc, project, opts, rep) })
		var ne *newEpoch
		if !errors.As(err, &ne) {
			break
		}
		if _, err := s.repushAll(ctx, sc, project, opts, rep); err != nil {
			return err
		}
		rep.NewEpoch = ne.epoch
		if err := s.restartChain(ctx, ledger.Start(project, ne.epoch)); err != nil {
			return err
		}
	}
	var fork *forkError
	if !errors.As(err, &fork) {
		return err
	}
	head, rerr := s.repushAll(ctx, sc, project, opts, rep)
	if rerr != nil {
		return errors.Join(fmt.Errorf("%w: %w", ErrFork, fork.err), rerr)
	}
	if head.Epoch > 0 {
		rep.NewEpoch = head.Epoch
		if err := s.restartChain(ctx, ledger.Start(project, head.Epoch)); err != nil {
			return err
		}
	}
	return fmt.Errorf("%w: %w", ErrFork, fork.err)
}

func (s *Store) resetCheckpoint(ctx context.Context, cp ledger.Checkpoint) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.db.Tx(ctx, func(tx *sql.Tx) error { return saveCheckpoint(ctx, tx, cp) })
}

// restartChain starts verifying the server's ledger again from cp, the
// start of a new epoch: nothing the device holds is confirmed in it until
// pulled again, and acknowledgements of the old epoch no longer count.
func (s *Store) restartChain(ctx context.Context, cp ledger.Checkpoint) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.db.Tx(ctx, func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, `UPDATE events SET confirmed = 0, server_lacks = 0, server_seq = NULL WHERE project_id = ?`,
			cp.Project); err != nil {
			return fmt.Errorf("client: restart the chain of %s: %w", cp.Project, err)
		}
		return saveCheckpoint(ctx, tx, cp)
	})
}

// maxBatchBytes bounds the events of one push, well under the server's
// message limit.
const maxBatchBytes = 4 << 20

// batches splits events into batches of at most n events and maxBatchBytes.
func batches(events []outboxEvent, n int) [][]outboxEvent {
	var out [][]outboxEvent
	var cur []outboxEvent
	size := 0
	for _, e := range events {
		es := len(e.body) + len(e.sig)
		if len(cur) > 0 && (len(cur) == n || size+es > maxBatchBytes) {
			out = append(out, cur)
			cur, size = nil, 0
		}
		cur = append(cur, e)
		size += es
	}
	if len(cur) > 0 || len(out) == 0 {
		out = append(out, cur) // an empty outbox still makes one (empty) push
	}
	return out
}

type outboxEvent struct {
	id        string
	body, sig []byte
	acked     bool   // the server acknowledged it before: this is an offer again
	seq       uint64 // its device sequence number
}

// The queries of the events table a sync runs, besides those by event id.
// Each reads only the rows it returns, through a partial index or a key,
// whatever the store holds (TestSyncQueryPlans reads their plans); the
// whole project is read only to push everything back (everythingQuery).
const (
	// outboxQuery: what a push offers, through events_unconfirmed (the
	// entries not yet seen in the verified chain).
	outboxQuery = `SELECT event_id, body, signature, status = 'accepted', device_seq FROM events WHERE project_id = ? AND confirmed = 0
		AND (status = 'accepted' OR origin = 'local' AND status IN ('pending', 'waiting'))
		ORDER BY hlc_wall, hlc_logical, device_id, event_id`
	// everythingQuery: every entry of the project, to push back to a server
	// that lost some.
	everythingQuery = `SELECT event_id, body, signature, status = 'accepted', device_seq FROM events WHERE project_id = ? AND status NOT IN ('rejected', 'discarded')
		ORDER BY hlc_wall, hlc_logical, device_id, event_id`
	// supplyQuery: a device's entries in a range of its sequence numbers,
	// which the server asked for, through the (device_id, device_seq) key;
	// the project is checked on each row (+project_id keeps SQLite from
	// reading the project's index instead, every entry of the project).
	supplyQuery = `SELECT event_id, body, signature, status = 'accepted', device_seq FROM events
		WHERE +project_id = ? AND device_id = ? AND device_seq > ? AND device_seq <= ? ORDER BY device_seq`
	// lackingUpdate: after a pull, the acknowledged entries it did not bring
	// back, through events_unconfirmed (named: left to itself SQLite may
	// take the index of project_id and read every entry of the project).
	lackingUpdate = `UPDATE events INDEXED BY events_unconfirmed SET server_lacks = 1 WHERE project_id = ? AND confirmed = 0
		AND server_lacks = 0 AND status = 'accepted' AND (server_seq IS NULL OR server_seq > ?)`
	// outboxStatusQuery: the outbox's size for Status, through the partial
	// index of the local entries not accepted, events_outbox, whose
	// condition it names. Left to itself SQLite takes the index of
	// project_id and reads every entry of the project.
	outboxStatusQuery = `SELECT COUNT(*), COUNT(*) FILTER (WHERE status = 'waiting'), MIN(created_micros) FROM events INDEXED BY events_outbox
		WHERE origin = 'local' AND status != 'accepted' AND status IN ('pending', 'waiting') AND project_id = ?`
)

// outbox returns what a push offers the server: the pending and waiting
// entries, and every entry the server acknowledged (or the device pulled)
// that the device has not seen in the chain it verified, in hybrid time
// order. With all, it returns every entry the device holds.
func (s *Store) outbox(ctx context.Context, project string, all bool) ([]outboxEvent, error) {
	if all {
		return s.offers(ctx, everythingQuery, project)
	}
	return s.offers(ctx, outboxQuery, project)
}

func (s *Store) offers(ctx context.Context, q string, args ...any) ([]outboxEvent, error) {
	rows, err := s.db.Reader().QueryContext(ctx, q, args...)
	if err != nil {
		return nil, fmt.Errorf("client: outbox: %w", err)
	}
	defer rows.Close()
	var out []outboxEvent
	for rows.Next() {
		var e outboxEvent
		if err := rows.Scan(&e.id, &e.body, &e.sig, &e.acked, &e.seq); err != nil {
			return nil, fmt.Errorf("client: outbox: %w", err)
		}
		out = append(out, e)
	}
	return out, rows.Err()
}

// pushOutbox pushes the outbox in batches: the pending and waiting entries,
// and those the server acknowledged that the device has not seen in the
// chain it verified after cp (a server restored from an older copy lost
// them). It pushes again while entries that waited for others get
// accepted, and while the server asks for entries (a gap in a device's
// sequence) that the device holds and has not yet offered in this sync. It
// records each outcome, and the entries asked for that it does not hold.
func (s *Store) pushOutbox(ctx context.Context, sc pb.SyncServiceClient, project string, cp ledger.Checkpoint, opts SyncOptions, rep *SyncReport) (ledger.Checkpoint, error) {
	var head ledger.Checkpoint
	offered := map[string]bool{} // entries offered in this sync and settled or asked for
	var asked []outboxEvent
	for round := 0; round < 8; round++ {
		events, err := s.outbox(ctx, project, false)
		if err != nil {
			return head, err
		}
		events = slices.DeleteFunc(events, func(e outboxEvent) bool { return offered[e.id] })
		for _, e := range asked {
			if !slices.ContainsFunc(events, func(o outboxEvent) bool { return o.id == e.id }) {
				events = append(events, e)
			}
		}
		accepted := 0
		var sent int
		var bytes int64
		waitingLeft := 0
		var missing []*pb.MissingEntries
		for _, batch := range batches(events, opts.BatchSize) {
			req := &pb.PushRequest{ProjectId: project, DeviceTimeMicros: s.now().UnixMicro(), Verified: ledger.CheckpointToProto(cp)}
			acked := map[string]bool{}
			for _, e := range batch {
				req.Events = append(req.Events, &pb.Event{Body: e.body, Signature: e.sig})
				bytes += int64(len(e.body) + len(e.sig))
				acked[e.id] = e.acked
			}
			var resp *pb.PushResponse
			if err := retry(ctx, opts, func() (err error) { resp, err = sc.Push(ctx, req); return fromWire(err) }); err != nil {
				return head, fmt.Errorf("client: push: %w", err)
			}
			head = ledger.CheckpointFromProto(resp.GetHead())
			missing = resp.GetMissing() // the latest list is the server's latest knowledge
			rep.ClockSkew = time.Duration(resp.GetClockSkewMicros()) * time.Microsecond
			n, w, err := s.recordOutcomes(ctx, resp.GetOutcomes(), cp, head, rep)
			if err != nil {
				return head, err
			}
			for _, o := range resp.GetOutcomes() {
				if o.GetStatus() != pb.PushStatus_PUSH_STATUS_WAITING {
					offered[o.GetEventId()] = true
				}
				if o.GetStatus() == pb.PushStatus_PUSH_STATUS_ACCEPTED && acked[o.GetEventId()] {
					rep.Repushed++ // the server had lost it
				}
			}
			accepted += n
			waitingLeft += w
			sent += len(batch)
			if opts.Progress != nil {
				opts.Progress(Progress{Phase: "push", Events: sent, Bytes: bytes, Total: len(events)})
			}
		}
		if asked, err = s.supply(ctx, project, missing, offered); err != nil {
			return head, err
		}
		for _, e := range asked {
			offered[e.id] = true
		}
		rep.Supplied += len(asked)
		if (waitingLeft == 0 || accepted == 0) && len(asked) == 0 {
			break
		}
	}
	return head, nil
}

// supply returns the entries this device holds that the server listed as
// missing and that it has not offered in this sync, and records the listed
// entries it does not hold, for Status.
func (s *Store) supply(ctx context.Context, project string, missing []*pb.MissingEntries, offered map[string]bool) ([]outboxEvent, error) {
	var out []outboxEvent
	var unheld []MissingEntry
	for _, m := range missing {
		held, err := s.offers(ctx, supplyQuery, project, m.GetDeviceId(), m.GetAfterDeviceSeq(), m.GetThroughDeviceSeq())
		if err != nil {
			return nil, err
		}
		var last uint64
		for _, e := range held {
			if !offered[e.id] {
				out = append(out, e)
			}
			last = max(last, e.seq)
		}
		if last != m.GetThroughDeviceSeq() {
			unheld = append(unheld, MissingEntry{Device: m.GetDeviceId(), Seq: m.GetThroughDeviceSeq()})
		}
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	err := s.db.Tx(ctx, func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, `DELETE FROM server_missing WHERE project_id = ?`, project); err != nil {
			return err
		}
		for _, m := range unheld {
			if _, err := tx.ExecContext(ctx, `INSERT OR IGNORE INTO server_missing (project_id, device_id, device_seq) VALUES (?, ?, ?)`,
				project, m.Device, m.Seq); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("client: record entries the server lacks: %w", err)
	}
	return out, nil
}

// recordOutcomes stores what the server said of each pushed event. cp is
// the point the push said the device had verified and head the server's
// head after the push: an event the server holds at or below cp, in the
// same epoch, is in the chain the device verified, and so confirmed.
func (s *Store) recordOutcomes(ctx context.Context, outs []*pb.PushOutcome, cp, head ledger.Checkpoint, rep *SyncReport) (accepted, waiting int, err error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	anyRejected := false
	now := s.now().UnixMicro()
	err = s.db.Tx(ctx, func(tx *sql.Tx) error {
		for _, o := range outs {
			var q string
			args := []any{}
			switch o.GetStatus() {
			case pb.PushStatus_PUSH_STATUS_ACCEPTED, pb.PushStatus_PUSH_STATUS_ALREADY_PRESENT:
				if o.GetStatus() == pb.PushStatus_PUSH_STATUS_ACCEPTED {
					rep.Accepted++
					accepted++
				} else {
					rep.AlreadyPresent++
				}
				seen := head.Epoch == cp.Epoch && o.GetSequence() <= cp.Seq
				q, args = `UPDATE events SET status = 'accepted', server_seq = ?, reason = '', field = '', rule = '', message = '', server_lacks = 0,
					waiting_for = '', waiting_since_micros = 0, confirmed = MAX(confirmed, ?) WHERE event_id = ? AND status != 'discarded'`,
					[]any{o.GetSequence(), seen, o.GetEventId()}
			case pb.PushStatus_PUSH_STATUS_WAITING:
				rep.Waiting++
				waiting++
				q, args = `UPDATE events SET status = CASE WHEN origin = 'local' AND status = 'pending' THEN 'waiting' ELSE status END,
					message = ?, waiting_for = ?, waiting_since_micros = CASE WHEN waiting_since_micros = 0 THEN ? ELSE waiting_since_micros END
					WHERE event_id = ? AND status NOT IN ('rejected', 'discarded')`,
					[]any{o.GetMessage(), strings.Join(o.GetWaitingFor(), " "), now, o.GetEventId()}
			case pb.PushStatus_PUSH_STATUS_REJECTED:
				rep.Rejected++
				anyRejected = true
				q, args = `UPDATE events SET status = 'rejected', reason = ?, field = ?, rule = ?, message = ?, waiting_for = '', waiting_since_micros = 0
					WHERE event_id = ? AND origin = 'local' AND status IN ('pending', 'waiting')`,
					[]any{ledger.ReasonFromProto(o.GetReason()).String(), o.GetField(), o.GetRule(), o.GetMessage(), o.GetEventId()}
			default:
				continue
			}
			if _, err := tx.ExecContext(ctx, q, args...); err != nil {
				return fmt.Errorf("client: record outcome of %s: %w", o.GetEventId(), err)
			}
		}
		return nil
	})
	if err == nil && anyRejected {
		err = s.loadViews(ctx)
	}
	return accepted, waiting, err
}

// repushAll pushes every event the device holds of a project, its own and
// those it received, so a server that lost events gets them back. It tells
// the server the point it had verified, so a server that lacks it opens a
// new epoch; it returns the server's head.
func (s *Store) repushAll(ctx context.Context, sc pb.SyncServiceClient, project string, opts SyncOptions, rep *SyncReport) (ledger.Checkpoint, error) {
	var head ledger.Checkpoint
	cp, err := s.checkpoint(ctx, project)
	if err != nil {
		return head, err
	}
	events, err := s.outbox(ctx, project, true)
	if err != nil {
		return head, err
	}
	for _, batch := range batches(events, opts.BatchSize) {
		req := &pb.PushRequest{ProjectId: project, DeviceTimeMicros: s.now().UnixMicro(), Verified: ledger.CheckpointToProto(cp)}
		for _, e := range batch {
			req.Events = append(req.Events, &pb.Event{Body: e.body, Signature: e.sig})
		}
		var resp *pb.PushResponse
		if err := retry(ctx, opts, func() (err error) { resp, err = sc.Push(ctx, req); return fromWire(err) }); err != nil {
			return head, fmt.Errorf("client: push back: %w", err)
		}
		head = ledger.CheckpointFromProto(resp.GetHead())
		var scratch SyncReport
		if _, _, err := s.recordOutcomes(ctx, resp.GetOutcomes(), cp, head, &scratch); err != nil {
			return head, err
		}
		rep.Repushed += scratch.Accepted
	}
	return head, nil
}

type forkError struct{ err error }

// newEpoch says the server opened a new epoch since the device verified.
type newEpoch struct{ epoch uint64 }

func (n *newEpoch) Error() string { return fmt.Sprintf("the server opened epoch %d", n.epoch) }

func (f *forkError) Error() string { return f.err.Error() }

// errOwnLacking says a pull that left out the device's own events met one
// the device does not hold (its store was restored from an older copy), or
// whose copy does not give the server's chain hash.
var errOwnLacking = errors.New("the server's ledger holds an entry of this device that its store lacks")

// pull streams the ledger after the verified point, verifying each chunk
// and applying it in one transaction with the new checkpoint. The server
// leaves out the device's own events, which the device rebuilds from the
// copies it holds to verify the chain; when it lacks one, it pulls again,
// from the point verified so far, with its own events in full.
func (s *Store) pull(ctx context.Context, sc pb.SyncServiceClient, project string, opts SyncOptions, rep *SyncReport) error {
	err := s.pullChain(ctx, sc, project, opts, rep, true)
	if errors.Is(err, errOwnLacking) {
		err = s.pullChain(ctx, sc, project, opts, rep, false)
	}
	return err
}

// pullChain is one pull, with the device's own events left out (omitOwn)
// or in full. Receiving, opening and verifying chunks (pullChunks, on its
// own goroutine, its opening split across the cores) runs ahead of storing
// and applying them (here), by up to two chunks: what was verified is
// stored in order, and an error met ahead ends the pull after the chunks
// verified before it are stored, as when the two ran in turn.
func (s *Store) pullChain(ctx context.Context, sc pb.SyncServiceClient, project string, opts SyncOptions, rep *SyncReport, omitOwn bool) error {
	cp, err := s.checkpoint(ctx, project)
	if err != nil {
		return err
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	// The server reads the cursor's epoch and sequence; the device checks
	// the hash itself against the anchor the server sends.
	stream, err := sc.Pull(ctx, &pb.PullRequest{ProjectId: project, After: &pb.Checkpoint{Epoch: cp.Epoch, Sequence: cp.Seq},
		ReferenceDataFirst: cp.Seq == 0, OmitOwnEvents: omitOwn})
	if err != nil {
		return fromWire(err)
	}
	chunks := make(chan pulledChunk, 2)
	go s.pullChunks(ctx, stream, project, cp, omitOwn, chunks)
	// On an error here, stop the reader and wait for it to end.
	fail := func(err error) error {
		cancel()
		for range chunks {
		}
		return err
	}
	var received int
	var bytes int64
	var held *pulledChunk // a chunk taken from chunks but not yet merged
	next := func() (pulledChunk, bool) {
		if held != nil {
			c := *held
			held = nil
			return c, true
		}
		c, ok := <-chunks
		return c, ok
	}
	for {
		c, ok := next()
		if !ok {
			break
		}
		// Chunks verified while the last were being stored are stored
		// together, in one transaction, up to maxMerged events: when the
		// writing lags, fewer commits.
		for !c.done && c.err == nil && len(c.signed) < maxMerged {
			var more pulledChunk
			select {
			case more, ok = <-chunks:
			default:
				ok = false
			}
			if !ok {
				break
			}
			if more.done || more.err != nil || more.chained != c.chained {
				held = &more
				break
			}
			c = mergeChunks(c, more)
		}
		if c.done {
			rep.Head = checkpointOf(c.at)
		}
		if c.err != nil {
			return fail(c.err)
		}
		if c.done {
			if err := s.markLacking(ctx, project, c.from); err != nil {
				return fail(err)
			}
			return fail(s.resetCheckpointIfNew(ctx, c.at))
		}
		fresh, err := s.applyPulled(ctx, project, c.signed, c.seqs, c.skews, c.at, c.chained)
		if err != nil {
			return fail(err)
		}
		received += len(c.signed)
		bytes += c.bytes
		rep.Pulled += fresh
		if opts.Progress != nil {
			opts.Progress(Progress{Phase: "pull", Events: received, Bytes: bytes})
		}
	}
	// pullChunks ends with done or an error unless the context ended.
	if err := context.Cause(ctx); err != nil {
		return fmt.Errorf("client: pull: %w", err)
	}
	return fmt.Errorf("client: pull: the chunks ended early")
}

// maxMerged bounds the events of pulled chunks stored in one transaction.
const maxMerged = 2000

// mergeChunks returns the chunks a and, after it, b as one: b's point
// verified, both's events. Both are chain entries, or neither is.
func mergeChunks(a, b pulledChunk) pulledChunk {
	a.signed = append(a.signed, b.signed...)
	if a.seqs != nil {
		a.seqs = append(a.seqs, b.seqs...)
	}
	a.skews = append(a.skews, b.skews...)
	a.at = b.at
	a.bytes += b.bytes
	return a
}

// pulledChunk is a verified chunk of a pull, ready to store; or the pull's
// end (done: at is the point verified, from the point the pull verified
// from); or the error that ended it (with done, after the whole stream).
type pulledChunk struct {
	signed  []ledger.Signed
	seqs    []uint64
	skews   []int64
	at      ledger.Checkpoint
	from    uint64
	chained bool
	bytes   int64
	done    bool
	err     error
}

// pullChunks receives the pull's chunks from stream, checks the anchor,
// opens each chunk's events and verifies the chain, and sends each chunk
// on out, then a done or an error, and closes out.
func (s *Store) pullChunks(ctx context.Context, stream grpc.ServerStreamingClient[pb.PullResponse], project string, cp ledger.Checkpoint, omitOwn bool, out chan<- pulledChunk) {
	defer close(out)
	send := func(c pulledChunk) bool {
		select {
		case out <- c:
			return true
		case <-ctx.Done():
			return false
		}
	}
	s.mu.Lock()
	self, pub := s.deviceID, s.PublicKey()
	s.mu.Unlock()
	v := ledger.NewVerifier(cp)
	checked := false
	for {
		resp, err := stream.Recv()
		if err == io.EOF {
			break
		}
		if err != nil {
			send(pulledChunk{err: fromWire(err)})
			return
		}
		if a := resp.GetAnchor(); a != nil && !checked {
			anchor := ledger.CheckpointFromProto(a)
			switch {
			case cp.Epoch == 0: // a first sync: verify from the start
				cp = ledger.Start(project, anchor.Epoch)
				v = ledger.NewVerifier(cp)
			case anchor.Epoch > cp.Epoch:
				send(pulledChunk{err: &newEpoch{anchor.Epoch}})
				return
			default:
				if err := v.CheckHead(anchor); err != nil {
					send(pulledChunk{err: &forkError{err}})
					return
				}
				if err := v.CheckAnchor(anchor); err != nil {
					send(pulledChunk{err: &forkError{err}})
					return
				}
			}
			checked = true
		}
		entries := resp.GetEntries()
		if len(entries) == 0 {
			continue
		}
		c, err := s.openChunk(ctx, project, self, pub, resp, v, omitOwn)
		if err != nil {
			send(pulledChunk{err: err})
			return
		}
		if !send(c) {
			return
		}
	}
	if !checked {
		send(pulledChunk{done: true, at: v.At(), err: fmt.Errorf("client: pull: the server sent no anchor")})
		return
	}
	send(pulledChunk{done: true, at: v.At(), from: cp.Seq})
}

// openChunk opens a pulled chunk's events, rebuilds the device's own
// entries the server left out from the copies it holds, and verifies the
// chunk's chain entries with v.
func (s *Store) openChunk(ctx context.Context, project, self string, pub ed25519.PublicKey, resp *pb.PullResponse, v *ledger.Verifier, omitOwn bool) (pulledChunk, error) {
	entries := resp.GetEntries()
	keys := func(dev string) (ed25519.PublicKey, bool) {
		if dev == self {
			return pub, true
		}
		k, ok := resp.GetDeviceKeys()[dev]
		return ed25519.PublicKey(k), ok && len(k) == ed25519.PublicKeySize
	}
	own, err := s.ownEvents(ctx, project, self, entries, omitOwn)
	if err != nil {
		return pulledChunk{}, err
	}
	chained := !resp.GetReferenceData()
	// The chunk's events are opened together: decoded, their signatures
	// checked at once by the batch verifier, validated.
	var sent []*pb.Event
	for _, e := range entries {
		if e.GetOwnDeviceSeq() == 0 || e.GetEvent() != nil {
			sent = append(sent, e.GetEvent())
		}
	}
	opened, openErrs := ledger.OpenBatch(sent, keys)
	c := pulledChunk{chained: chained, signed: make([]ledger.Signed, 0, len(entries)),
		seqs: make([]uint64, 0, len(entries)), skews: make([]int64, 0, len(entries))}
	chain := make([]ledger.Entry, 0, len(entries))
	prev := v.At().Hash // the hash before each entry, for those whose hash the device computes
	rebuilt := false    // whether the last entry's hash was computed here
	next := 0           // the next of opened
	for _, e := range entries {
		var sg ledger.Signed
		var h ledger.Hash
		var env []byte
		if n := e.GetOwnDeviceSeq(); n > 0 && e.GetEvent() == nil {
			sg = own[n]
			env = sg.Bytes()
			h = ledger.Link(prev, e.GetSequence(), env)
			rebuilt = true
		} else {
			sg, err = opened[next], openErrs[next]
			next++
			if err != nil {
				return pulledChunk{}, &forkError{fmt.Errorf("event %d from the server: %w", e.GetSequence(), err)}
			}
			env = sg.Bytes()
			copy(h[:], e.GetHash())
			c.bytes += int64(len(sg.Body) + len(sg.Signature))
			rebuilt = false
		}
		prev = h
		chain = append(chain, ledger.Entry{Seq: e.GetSequence(), Event: env, Hash: h})
		c.signed = append(c.signed, sg)
		c.seqs = append(c.seqs, e.GetSequence())
		c.skews = append(c.skews, e.GetClockSkewMicros())
	}
	if chained {
		if err := v.Verify(chain); err != nil {
			if len(own) > 0 && errors.Is(err, ledger.ErrChainBroken) {
				return pulledChunk{}, errOwnLacking // the device's copy may not be what the server holds: pull them in full
			}
			return pulledChunk{}, &forkError{err}
		}
		if rebuilt { // the chunk's head confirms the hashes computed at its end
			head := ledger.CheckpointFromProto(resp.GetHead())
			if at := v.At(); head.Epoch != at.Epoch || head.Seq != at.Seq || head.Hash != at.Hash {
				return pulledChunk{}, errOwnLacking
			}
		}
	} else {
		c.seqs = nil // out of chain order: keep no sequence for them yet
	}
	c.at = v.At()
	return c, nil
}

// ownEventsQuery finds the copies of the device's own entries the server
// sent by their device sequence numbers, one lookup each in the
// (device_id, device_seq) key, the project checked on each row: with a
// long list of numbers SQLite would otherwise read the project's index,
// every entry of the project (+project_id keeps it from that index).
const ownEventsQuery = `SELECT device_seq, event_id, body, signature FROM events WHERE device_id = ? AND +project_id = ? AND device_seq IN (`

// ownEvents returns the copies this device holds of the entries of a
// pulled chunk sent as its device sequence numbers, by sequence number. It
// returns errOwnLacking when it holds not all of them, and a fork when the
// server sent such entries unasked.
func (s *Store) ownEvents(ctx context.Context, project, self string, entries []*pb.LedgerEntry, asked bool) (map[uint64]ledger.Signed, error) {
	var want []any
	for _, e := range entries {
		if n := e.GetOwnDeviceSeq(); n > 0 && e.GetEvent() == nil {
			want = append(want, n)
		}
	}
	if len(want) == 0 {
		return nil, nil
	}
	if !asked {
		return nil, &forkError{fmt.Errorf("the server sent entry %d without its event", entries[0].GetSequence())}
	}
	out := make(map[uint64]ledger.Signed, len(want))
	type copyHeld struct {
		id        string
		body, sig []byte
	}
	held := make(map[uint64]copyHeld, len(want))
	for part := range slices.Chunk(want, 500) {
		q := ownEventsQuery + strings.Repeat("?, ", len(part)-1) + "?)"
		rows, err := s.db.Reader().QueryContext(ctx, q, append([]any{self, project}, part...)...)
		if err != nil {
			return nil, fmt.Errorf("client: read own entries: %w", err)
		}
		for rows.Next() {
			var n uint64
			var c copyHeld
			if err := rows.Scan(&n, &c.id, &c.body, &c.sig); err != nil {
				rows.Close()
				return nil, fmt.Errorf("client: read own entries: %w", err)
			}
			held[n] = c
		}
		rows.Close()
		if err := rows.Err(); err != nil {
			return nil, fmt.Errorf("client: read own entries: %w", err)
		}
	}
	if len(held) != len(want) {
		return nil, errOwnLacking
	}
	s.mu.Lock()
	v := s.view(project)
	for n, c := range held {
		if e, ok := v.Event(c.id); ok {
			if _, same := v.HeldAs(c.id, c.body); same {
				out[n] = ledger.Signed{Event: e, Body: c.body, Signature: c.sig}
				delete(held, n)
			}
		}
	}
	s.mu.Unlock()
	for n, c := range held { // not in the view (rejected or discarded here): decode the copy
		sg, err := ledger.FromEnvelope(&pb.Event{Body: c.body, Signature: c.sig})
		if err != nil {
			return nil, fmt.Errorf("client: own entry %d: %w", n, err)
		}
		out[n] = sg
	}
	return out, nil
}

// markLacking notes, after a pull that verified the server's whole ledger
// from the point after, the entries the server lacks: those it acknowledged
// above that point (or in no known place) that the pull did not bring back.
// The server either lost them or holds another entry at their place.
func (s *Store) markLacking(ctx context.Context, project string, after uint64) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, err := s.db.Writer().ExecContext(ctx, lackingUpdate, project, after); err != nil {
		return fmt.Errorf("client: note entries the server lacks: %w", err)
	}
	return nil
}

func (s *Store) resetCheckpointIfNew(ctx context.Context, cp ledger.Checkpoint) error {
	cur, err := s.checkpoint(ctx, cp.Project)
	if err != nil || cur == cp {
		return err
	}
	return s.resetCheckpoint(ctx, cp)
}

// applyPulled stores and applies pulled events, with the new checkpoint
// when they are chain entries, in one transaction. It returns how many of
// them are other devices' entries this device did not hold before: what
// SyncReport.Pulled counts (the device's own entries come back in the
// chain, and a first sync receives the reference data twice).
// skews[i] is the clock skew the server recorded for evs[i].
func (s *Store) applyPulled(ctx context.Context, project string, evs []ledger.Signed, seqs []uint64, skews []int64, cp ledger.Checkpoint, chained bool) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	fresh := 0
	for _, sg := range evs {
		ok, same := v.HeldAs(sg.Event.ID, sg.Body)
		if ok && !same {
			return 0, &forkError{fmt.Errorf("event %s from the server differs from the one this device holds", sg.Event.ID)}
		}
		if !ok && sg.Event.Device != s.deviceID {
			fresh++
		}
	}
	// A store restored from an older copy gets its own later entries back:
	// its next entry must be numbered after them.
	var ownLast uint64
	for _, sg := range evs {
		if sg.Event.Device == s.deviceID {
			ownLast = max(ownLast, sg.Event.DeviceSeq)
		}
	}
	st, err := s.pulledStmts(ctx)
	if err != nil {
		return 0, fmt.Errorf("client: store pulled events: %w", err)
	}
	err = s.db.Tx(ctx, func(tx *sql.Tx) error {
		if ownLast > 0 {
			if _, err := tx.ExecContext(ctx, `UPDATE device SET last_seq = MAX(last_seq, ?) WHERE id = 1`, ownLast); err != nil {
				return fmt.Errorf("client: own entries pulled back: %w", err)
			}
		}
		// A chain entry is confirmed: the device holds it at its place in
		// the chain it verified. The rows go in pulledRows at a time with
		// one prepared statement, the rest one by one with another.
		now := s.now().UnixMicro()
		args := make([]any, 0, pulledCols*pulledRows)
		many, one := tx.StmtContext(ctx, st.many), tx.StmtContext(ctx, st.one)
		for lo := 0; lo < len(evs); {
			n := pulledRows
			stmt := many
			if len(evs)-lo < pulledRows {
				n, stmt = 1, one
			}
			args = args[:0]
			for i := lo; i < lo+n; i++ {
				sg := &evs[i]
				e := &sg.Event
				var seq any
				if seqs != nil {
					seq = seqs[i]
				}
				args = append(args, e.ID, project, e.Device, e.DeviceSeq, e.Kind.KindName(), ledger.RecordID(e.Kind), e.HLC.Wall, e.HLC.Logical,
					sg.Body, sg.Signature, seq, now, seqs != nil, skews[i])
			}
			if _, err := stmt.ExecContext(ctx, args...); err != nil {
				if n == 1 {
					return fmt.Errorf("client: store pulled %s: %w", evs[lo].Event.ID, err)
				}
				return fmt.Errorf("client: store pulled events %s to %s: %w", evs[lo].Event.ID, evs[lo+n-1].Event.ID, err)
			}
			lo += n
		}
		if chained {
			return saveCheckpoint(ctx, tx, cp)
		}
		return nil
	})
	if err != nil {
		return 0, err
	}
	s.seq = max(s.seq, ownLast)
	for _, sg := range evs {
		// Other devices' events were validated as they were opened
		// (OpenBatch); the device's own may be copies read from the store.
		apply := v.ApplyValidated
		if sg.Event.Device == s.deviceID {
			apply = v.Apply
		}
		if _, err := apply(sg); err != nil { // its bytes are new or the same
			return 0, fmt.Errorf("client: apply pulled %s: %w", sg.Event.ID, err)
		}
		s.clock.Observe(sg.Event.HLC)
	}
	return fresh, nil
}
