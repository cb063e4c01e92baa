package server_test

import (
	"testing"

	"go.uber.org/goleak"
)

// TestMain fails the package when a test leaves goroutines behind: every
// server, connection and proxy a test starts must be stopped by it.
func TestMain(m *testing.M) {
	goleak.VerifyTestMain(m)
}
