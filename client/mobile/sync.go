package mobile

import (
	"google.golang.org/grpc"

	"tamp/client"
)

// connection is a gRPC connection kept for an address and CA file.
type connection struct {
	cc *grpc.ClientConn
}

func (c *connection) close() { c.cc.Close() }

// conn returns the store's connection to a server, dialling it once.
// caFile is a PEM file of the site's certificate authority ("" for the
// system's roots); plaintext is allowed only to a loopback address.
func (s *Store) conn(server, caFile string, plaintext bool) (*grpc.ClientConn, error) {
	key := server + "\x00" + caFile
	if plaintext {
		key += "\x00plaintext"
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	if c, ok := s.conns[key]; ok {
		return c.cc, nil
	}
	cc, err := client.Dial(server, client.DialOptions{CAFile: caFile, Plaintext: plaintext})
	if err != nil {
		return nil, wrap(err)
	}
	s.conns[key] = &connection{cc: cc}
	return cc, nil
}

// Enroll registers the device with the server at address with a one-time
// code from an administrator, and returns {"schema", "enrolment":
// {"user_id", "projects"}}. caFile is a PEM file of the site's certificate
// authority, "" for the system's roots; plaintext (loopback only) is for
// tests and demonstrations.
func (s *Store) Enroll(server, caFile string, plaintext bool, code, deviceName string, c *Cancel) (string, error) {
	cc, err := s.conn(server, caFile, plaintext)
	if err != nil {
		return "", err
	}
	if err := s.s.Enroll(c.context(), cc, code, deviceName); err != nil {
		return "", wrap(err)
	}
	return out("enrolment", struct {
		UserID   string   `json:"user_id"`
		Projects []string `json:"projects"`
	}{s.s.User(), s.s.EnrolledProjects()})
}

// Sync pushes the device's entries of a project and pulls the crew's,
// reporting progress to p (which may be nil), until done or c is
// cancelled. It returns {"schema", "sync": {accepted, already_present,
// waiting, rejected, pulled, head, ...}}.
func (s *Store) Sync(server, caFile string, plaintext bool, project string, p SyncProgress, c *Cancel) (string, error) {
	cc, err := s.conn(server, caFile, plaintext)
	if err != nil {
		return "", err
	}
	opts := client.SyncOptions{}
	if p != nil {
		opts.Progress = func(pr client.Progress) {
			p.OnProgress(pr.Phase, int64(pr.Events), pr.Bytes, int64(pr.Total))
		}
	}
	rep, err := s.s.Sync(c.context(), cc, project, opts)
	if err != nil {
		return "", wrap(err)
	}
	return out("sync", rep)
}
