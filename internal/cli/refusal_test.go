package cli

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	grpccodes "google.golang.org/grpc/codes"

	"tamp/client"
)

// refusal returns the server's refusal err holds, or the zero ServerError.
func refusal(err error) client.ServerError {
	var se *client.ServerError
	if errors.As(err, &se) {
		return *se
	}
	return client.ServerError{}
}

// A server's refusal prints as the server's message and its reason, and
// the original error stays reachable.
func TestPlainErrors(t *testing.T) {
	base := fmt.Errorf("client: push: %w", &client.ServerError{Code: grpccodes.PermissionDenied, Reason: "PERMISSION_DENIED",
		Rule: "project_admin", Message: "project_admin: only a server administrator or an administrator of project p may add members"})
	err := plain(base)
	if got, want := err.Error(), "client: push: project_admin: only a server administrator or an administrator of project p may add members [PERMISSION_DENIED]"; got != want {
		t.Errorf("plain printed %q, want %q", got, want)
	}
	if !errors.Is(err, base) || refusal(err).Rule != "project_admin" {
		t.Error("the original error is lost")
	}
	if plain(nil) != nil {
		t.Error("plain(nil) != nil")
	}
}

// A refusal the user can act on is followed by advice chosen by its
// reason, never by its text; the message is escaped.
func TestRefusalAdvice(t *testing.T) {
	for _, tc := range []struct {
		code   grpccodes.Code
		reason string
		advice string // a command or step the advice names
		is     error
	}{
		{grpccodes.Unauthenticated, "DEVICE_REVOKED", "tamp enroll", client.ErrRevoked},
		{grpccodes.Unauthenticated, "CODE_INVALID", "tamp admin issue-code", client.ErrCodeInvalid},
		{grpccodes.PermissionDenied, "NOT_A_MEMBER", "tamp admin add-member", client.ErrNotMember},
		{grpccodes.Unavailable, "STORAGE_FULL", "Try again later", client.ErrServerStorage},
		{grpccodes.ResourceExhausted, "RATE_LIMITED", "Wait a few seconds", client.ErrRateLimited},
	} {
		se := &client.ServerError{Code: tc.code, Reason: tc.reason, Field: "f", Message: "f: refused\x1b[2J"}
		err := plain(fmt.Errorf("client: push: %w", se))
		first, advice, _ := strings.Cut(err.Error(), "\n")
		if want := `client: push: f: refused\x1b[2J [` + tc.reason + "]"; first != want {
			t.Errorf("%s: printed %q, want %q", tc.reason, first, want)
		}
		if !strings.Contains(advice, tc.advice) {
			t.Errorf("%s: advice %q, want it to name %q", tc.reason, advice, tc.advice)
		}
		if !errors.Is(err, tc.is) {
			t.Errorf("%s: errors.Is(plain(err), %v) = false", tc.reason, tc.is)
		}
	}
	other := plain(fmt.Errorf("client: push: %w", &client.ServerError{Code: grpccodes.InvalidArgument, Reason: "INVALID_ARGUMENT",
		Field: "device_name", Message: "device_name: must not hold control characters (U+001B at byte 3)"}))
	if strings.Contains(other.Error(), "\n") {
		t.Errorf("a refusal with no advice printed %q", other.Error())
	}
}

// A failing test's verdict says why, in the trade's words, so a moisture
// failure beside a compaction limit it meets does not read as a compaction
// failure.
func TestVerdictWhy(t *testing.T) {
	for _, c := range []struct {
		r    client.Result
		want string
	}{
		{client.Result{Verdict: client.Pass}, "PASS"},
		{client.Result{Verdict: client.Pending}, "not graded"},
		{client.Result{Verdict: client.Fail, Reasons: []client.Finding{{Code: client.ReasonMoistureBelowWindow}}}, "FAIL: too dry"},
		{client.Result{Verdict: client.Fail, Reasons: []client.Finding{{Code: client.ReasonCompactionBelowMinimum}, {Code: client.ReasonMoistureAboveWindow}}},
			"FAIL: under-compacted, too wet"},
	} {
		if got := verdictWhy(c.r); got != c.want {
			t.Errorf("verdictWhy(%+v) = %q, want %q", c.r, got, c.want)
		}
	}
}
