package ledger

import (
	"errors"
	"fmt"
)

// Reason is why an event is refused. The values match tamp.v1.RejectReason.
type Reason int

// The reasons an event is refused.
const (
	Malformed          Reason = iota + 1 // does not decode
	UnknownKind                          // a kind, field or enum value this version does not know
	BadSignature                         // signature does not verify
	InvalidField                         // a required field is missing or breaks a rule
	ImpossibleReadings                   // readings no real test can produce
	WrongProject                         // belongs to another project
	ConflictingID                        // a record id reused with other content
	PermissionDenied                     // the author may not make this entry
)

var reasonNames = map[Reason]string{
	Malformed: "malformed", UnknownKind: "unknown_kind", BadSignature: "bad_signature", InvalidField: "invalid_field",
	ImpossibleReadings: "impossible_readings", WrongProject: "wrong_project", ConflictingID: "conflicting_id",
	PermissionDenied: "permission_denied",
}

func (r Reason) String() string {
	if s, ok := reasonNames[r]; ok {
		return s
	}
	return fmt.Sprintf("Reason(%d)", int(r))
}

// Rejection is the error returned for an event that must be refused. It
// names the reason, the field and the rule in plain words.
type Rejection struct {
	Reason Reason
	Field  string // the field at fault, if one is
	Detail string
	Err    error // the underlying cause, if any
}

func (r *Rejection) Error() string {
	if r.Field != "" {
		return fmt.Sprintf("ledger: %s: %s: %s", r.Reason, r.Field, r.Detail)
	}
	return fmt.Sprintf("ledger: %s: %s", r.Reason, r.Detail)
}

func (r *Rejection) Unwrap() error { return r.Err }

// FieldRule returns what the rejection names, as a push outcome carries it:
// the rule broken for PermissionDenied (whose Field holds the rule's name,
// e.g. "no_self_review"), and the field at fault for every other reason.
func (r *Rejection) FieldRule() (field, rule string) {
	if r.Reason == PermissionDenied {
		return "", r.Field
	}
	return r.Field, ""
}

func reject(reason Reason, field, detail string) *Rejection {
	return &Rejection{Reason: reason, Field: field, Detail: detail}
}

// ReasonOf returns the reason of a *Rejection in err's chain, or zero.
func ReasonOf(err error) Reason {
	var r *Rejection
	if errors.As(err, &r) {
		return r.Reason
	}
	return 0
}

// Errors of the hash chain, returned (wrapped) by Verifier.Verify and
// CheckHead.
var (
	// ErrChainBroken: an entry's hash does not follow from the previous hash
	// and the entry's bytes; an event was edited or replaced.
	ErrChainBroken = errors.New("ledger: hash chain broken: an event was altered")
	// ErrChainGap: entries are not consecutive; the chain was reordered or
	// truncated.
	ErrChainGap = errors.New("ledger: hash chain has a gap or is out of order")
	// ErrForked: the server's history no longer contains the point the
	// device verified; it was rewritten.
	ErrForked = errors.New("ledger: the server's history forks from the point this device verified")
	// ErrRolledBack: the server holds fewer events than the device verified;
	// it was restored from an older copy.
	ErrRolledBack = errors.New("ledger: the server's ledger is behind the point this device verified")
	// ErrEpochRolledBack: the server reports an older epoch than the device
	// holds.
	ErrEpochRolledBack = errors.New("ledger: the server's epoch is older than the one this device verified")
)
