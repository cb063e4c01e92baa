package server

import (
	"context"

	"tamp/internal/ledger"
)

// Inspect runs fn with a project's projection as the store holds it, under
// the project's lock, for the tests of package server_test.
func (s *Server) Inspect(ctx context.Context, id string, fn func(*ledger.Projection)) error {
	return s.inspect(ctx, id, fn)
}
