package daemon

import (
	"testing"

	"go.uber.org/goleak"
)

// TestMain fails the package when tampd leaves goroutines behind after it
// stops.
func TestMain(m *testing.M) {
	goleak.VerifyTestMain(m)
}
