package pgstore

import (
	"context"
	"errors"
	"fmt"
	"io"
	"testing"

	"github.com/jackc/pgx/v5/pgconn"

	"tamp/server"
)

// PostgreSQL's errors map to the server's storage faults by SQLSTATE;
// errors of another kind, and a cancelled call, stay as they are.
func TestFaultNamesStorageFaults(t *testing.T) {
	pg := func(code string) error { return fmt.Errorf("exec: %w", &pgconn.PgError{Code: code, Message: "m"}) }
	for _, tc := range []struct {
		name string
		err  error
		want error // nil: not a storage fault
	}{
		{"disk_full", pg("53100"), server.ErrStorageFull},
		{"read_only_sql_transaction", pg("25006"), server.ErrStorageReadOnly},
		{"io_error", pg("58030"), server.ErrStorageIO},
		{"connection_failure", pg("08006"), server.ErrStorageIO},
		{"admin_shutdown", pg("57P01"), server.ErrStorageIO},
		{"cannot_connect_now", pg("57P03"), server.ErrStorageIO},
		{"a lost connection", fmt.Errorf("read: %w", io.ErrUnexpectedEOF), server.ErrStorageIO},
		{"unique_violation", pg("23505"), nil},
		{"out_of_memory", pg("53200"), nil},
		{"syntax_error", pg("42601"), nil},
		{"cancelled", fmt.Errorf("query: %w", context.Canceled), nil},
		{"deadline", fmt.Errorf("query: %w: %w", context.DeadlineExceeded, io.EOF), nil},
	} {
		got := fault(tc.err)
		if !errors.Is(got, tc.err) {
			t.Errorf("%s: fault lost the error: %v", tc.name, got)
		}
		for _, f := range []error{server.ErrStorageFull, server.ErrStorageReadOnly, server.ErrStorageIO} {
			if errors.Is(got, f) != (f == tc.want) {
				t.Errorf("%s: fault = %v, want the fault %v", tc.name, got, tc.want)
			}
		}
	}
	if fault(nil) != nil {
		t.Error("fault(nil) is not nil")
	}
}
