package client

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"errors"
	"fmt"
	"io"

	"github.com/google/uuid"
	"google.golang.org/grpc"
	"google.golang.org/protobuf/proto"

	pb "tamp/internal/gen/tamp/v1"
	"tamp/internal/ledger"
)

// certificateSetting is the settings key of the device's enrolment
// certificate, which it shows a server that lost its enrolment.
const certificateSetting = "enrolment_certificate"

// Enroll registers the device with a server using a one-time code, keeping
// the bearer token, the user the server enrolled it for and its enrolment
// certificate.
//
// A device enrolled before (revoked, or moved to a new server) enrols again
// under a new device id and key: the entries it holds that never reached a
// server are signed again by the new key, keeping their ids and content,
// and name the device that first signed them (Event.ResignedFrom), so the
// history shows the hand-over. Entries signed by the old key that a server
// already holds stay as they are.
func (s *Store) Enroll(ctx context.Context, conn grpc.ClientConnInterface, code, name string) error {
	s.mu.Lock()
	again := s.hasToken(ctx)
	id, key := s.deviceID, s.key
	s.mu.Unlock()
	if again {
		var err error
		if id, key, err = s.newIdentity(); err != nil {
			return err
		}
	}
	resp, err := pb.NewAdminServiceClient(conn).EnrollDevice(ctx, &pb.EnrollDeviceRequest{
		Code: code, DeviceId: id, PublicKey: key.Public().(ed25519.PublicKey), DeviceName: name})
	if err != nil {
		return fmt.Errorf("client: enrol: %w", fromWire(err))
	}
	cert, err := proto.Marshal(resp.GetCertificate())
	if err != nil {
		return fmt.Errorf("client: enrol: keep the certificate: %w", err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	old := s.deviceID
	err = s.db.Tx(ctx, func(tx *sql.Tx) error {
		if _, err := tx.ExecContext(ctx, `UPDATE device SET token = ?, user_id = ? WHERE id = 1`, resp.GetToken(), resp.GetUserId()); err != nil {
			return err
		}
		if _, err := tx.ExecContext(ctx, `INSERT INTO settings (key, value) VALUES (?, ?) ON CONFLICT (key) DO UPDATE SET value = excluded.value`,
			certificateSetting, string(cert)); err != nil {
			return err
		}
		if !again {
			return nil
		}
		if _, err := tx.ExecContext(ctx, `UPDATE device SET device_id = ?, private_key = ?, last_seq = 0 WHERE id = 1`, id, key.Seed()); err != nil {
			return err
		}
		return s.resign(ctx, tx, old, id, key, resp.GetUserId())
	})
	if err != nil {
		return fmt.Errorf("client: store enrolment: %w", err)
	}
	s.user = resp.GetUserId()
	s.enrolled = resp.GetProjectIds()
	if again {
		s.deviceID, s.key = id, key
		if err := s.loadIdentityCounters(ctx); err != nil {
			return err
		}
		return s.loadViews(ctx)
	}
	return nil
}

func (s *Store) hasToken(ctx context.Context) bool {
	t, err := s.token(ctx)
	return err == nil && t != ""
}

func (s *Store) newIdentity() (string, ed25519.PrivateKey, error) {
	seed := make([]byte, ed25519.SeedSize)
	if _, err := io.ReadFull(s.rand, seed); err != nil {
		return "", nil, fmt.Errorf("client: generate device key: %w", err)
	}
	id, err := uuid.NewV7FromReader(s.rand)
	if err != nil {
		return "", nil, fmt.Errorf("client: generate device id: %w", err)
	}
	return id.String(), ed25519.NewKeyFromSeed(seed), nil
}

// resign signs again, with the new device's key, the entries the old
// device made for user that no server acknowledged, in their order. An
// entry of another user, or one today's checks refuse, is marked rejected
// with the reason, for the user to see.
func (s *Store) resign(ctx context.Context, tx *sql.Tx, old, id string, key ed25519.PrivateKey, user string) error {
	rows, err := tx.QueryContext(ctx, `SELECT body, signature FROM events WHERE origin = 'local' AND device_id = ? AND status IN ('pending', 'waiting')
		ORDER BY device_seq`, old)
	if err != nil {
		return err
	}
	var held []ledger.Signed
	for rows.Next() {
		var m pb.Event
		if err := rows.Scan(&m.Body, &m.Signature); err != nil {
			rows.Close()
			return err
		}
		sg, err := ledger.FromEnvelope(&m)
		if err != nil {
			rows.Close()
			return err
		}
		held = append(held, sg)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return err
	}
	prev := map[string]uint64{} // project -> the new device's previous entry in it
	var seq uint64
	for _, sg := range held {
		e := sg.Event
		e.Device, e.DeviceSeq, e.ResignedFrom = id, seq+1, old
		e.PrevDeviceSeq = prev[e.Project]
		if e.Author != user { // enrolled now for someone else: their entries are not handed over
			if _, err := tx.ExecContext(ctx, `UPDATE events SET status = 'rejected', reason = ?, field = '', rule = ?, message = ? WHERE event_id = ?`,
				ledger.PermissionDenied.String(), "author_is_device_user",
				"not signed again at re-enrolment: the device is now enrolled for another user", e.ID); err != nil {
				return err
			}
			continue
		}
		again, err := ledger.Seal(e, key)
		if err != nil { // an entry today's checks refuse stays, refused, for the user to see
			var field, rule string
			var r *ledger.Rejection
			if errors.As(err, &r) {
				field, rule = r.FieldRule()
			}
			if _, err := tx.ExecContext(ctx, `UPDATE events SET status = 'rejected', reason = ?, field = ?, rule = ?, message = ? WHERE event_id = ?`,
				ledger.ReasonOf(err).String(), field, rule, "not signed again at re-enrolment: "+err.Error(), e.ID); err != nil {
				return err
			}
			continue
		}
		if _, err := tx.ExecContext(ctx, `UPDATE events SET device_id = ?, device_seq = ?, body = ?, signature = ? WHERE event_id = ?`,
			id, e.DeviceSeq, again.Body, again.Signature, e.ID); err != nil {
			return err
		}
		seq, prev[e.Project] = e.DeviceSeq, e.DeviceSeq
	}
	_, err = tx.ExecContext(ctx, `UPDATE device SET last_seq = ? WHERE id = 1`, seq)
	return err
}

func (s *Store) loadIdentityCounters(ctx context.Context) error {
	if err := s.db.Writer().QueryRowContext(ctx, `SELECT last_seq FROM device WHERE id = 1`).Scan(&s.seq); err != nil {
		return fmt.Errorf("client: load device counters: %w", err)
	}
	return nil
}

// resumable reports whether a sync failed because the server does not know
// the device's token (it was restored from a copy older than the
// enrolment), and the device holds a certificate to resume with.
func (s *Store) resumable(err error) bool {
	if !errors.Is(err, ErrUnauthenticated) {
		return false
	}
	c, _ := s.Setting(context.Background(), certificateSetting)
	return c != ""
}

// ErrNoEnrolmentCertificate is returned by Resume for a device that holds no
// enrolment certificate (it enrolled with an older server).
var ErrNoEnrolmentCertificate = errors.New("client: this device holds no enrolment certificate; enrol it again with a new code")

// Resume proves the device's enrolment to a server that no longer knows
// it (restored from a copy older than the enrolment), with the certificate
// the server gave at enrolment and a signature by the device's key, and
// keeps the new token. A revoked device is refused.
func (s *Store) Resume(ctx context.Context, conn grpc.ClientConnInterface) error {
	c, err := s.Setting(ctx, certificateSetting)
	if err != nil {
		return err
	}
	if c == "" {
		return ErrNoEnrolmentCertificate
	}
	var cert pb.Event
	if err := proto.Unmarshal([]byte(c), &cert); err != nil {
		return fmt.Errorf("client: resume: the stored certificate: %w", err)
	}
	held, err := ledger.FromEnvelope(&cert)
	if err != nil {
		return fmt.Errorf("client: resume: the stored certificate: %w", err)
	}
	server := held.Event.Device // the server's own device signed it
	s.mu.Lock()
	id, key := s.deviceID, s.key
	s.mu.Unlock()
	micros := s.now().UnixMicro()
	resp, err := pb.NewAdminServiceClient(conn).ResumeDevice(ctx, &pb.ResumeDeviceRequest{Certificate: &cert, ProofMicros: micros,
		Proof: ed25519.Sign(key, ledger.ResumeProof(server, id, micros))})
	if err != nil {
		return fmt.Errorf("client: resume: %w", fromWire(err))
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if _, err := s.db.Writer().ExecContext(ctx, `UPDATE device SET token = ? WHERE id = 1`, resp.GetToken()); err != nil {
		return fmt.Errorf("client: resume: store token: %w", err)
	}
	return nil
}
