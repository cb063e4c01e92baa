package client

import (
	"cmp"
	"context"
	"errors"
	"fmt"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// Errors returned by the store's methods (wrapped; test with errors.Is).
var (
	// ErrClosed: the store was closed.
	ErrClosed = errors.New("client: store is closed")
	// ErrNotFound: no such test or event on this device; from a server, no
	// such project, user, device or pending invitation.
	ErrNotFound = errors.New("client: not found")
	// ErrNotAuthor: only a test's author may correct or void it.
	ErrNotAuthor = errors.New("client: only the test's author may change it")
	// ErrOwnTest: no one reviews, or accepts an exception on, a test they
	// recorded.
	ErrOwnTest = errors.New("client: no one decides on a test they recorded")
	// ErrReasonRequired: a correction or void needs a reason.
	ErrReasonRequired = errors.New("client: a reason is required")
	// ErrNotFailing: only a failing test can be retested.
	ErrNotFailing = errors.New("client: only a failing test can be retested")
	// ErrVoided: the test was voided.
	ErrVoided = errors.New("client: the test was voided")
	// ErrNoUser: the store has no user to sign entries for.
	ErrNoUser = errors.New("client: no user is set for this device")
	// ErrInvalid: the entry breaks a rule; the error is an *EntryError
	// naming the field.
	ErrInvalid = errors.New("client: invalid entry")
	// ErrNotRejected: only an event the server rejected can be discarded.
	ErrNotRejected = errors.New("client: the event was not rejected")
)

// EntryError is the error of an entry the store refuses before storing
// anything, as a server would refuse it: a value breaks a rule
// (errors.Is(err, ErrInvalid)), or the user may not make it
// (ErrOwnTest, ErrNotAuthor), or a required reason is missing
// (ErrReasonRequired). errors.As gives it to an app that wants the field or
// the rule; its Reason, Field and Rule take the values of a Rejected entry
// refused by a server for the same cause.
type EntryError struct {
	// Reason is machine-readable: "invalid_field", "impossible_readings",
	// "unknown_kind", "conflicting_id", "malformed" or "permission_denied".
	Reason string
	// Field is the field at fault, as a path within the entry (e.g.
	// "readings.sand_cone.soil_mass", "spec_id", "reason"), for every
	// reason but permission_denied; empty when no one field is.
	Field string
	// Rule is the rule the entry breaks, for permission_denied (e.g.
	// "no_self_review", "own_tests_only"); empty otherwise.
	Rule string
	// Message says what is wrong, for people. It may quote what the user
	// typed: escape it before printing it to a terminal.
	Message string

	err error // the error of this package it matches
}

func (e *EntryError) Error() string {
	s := cmp.Or(e.err, ErrInvalid).Error()
	if p := cmp.Or(e.Field, e.Rule); p != "" {
		s += ": " + p
	}
	return s + ": " + e.Message
}

// Unwrap returns the error of this package the refusal matches: ErrInvalid
// for an EntryError made outside this package.
func (e *EntryError) Unwrap() error { return cmp.Or(e.err, ErrInvalid) }

// ErrCertificate: the server's TLS certificate failed verification, so no
// call reached the server. Waiting does not mend it and it is not retried.
// The error is a *CertificateError, which names the problem.
var ErrCertificate = errors.New("client: the server's certificate failed verification")

// CertificateProblem says why a server's certificate failed verification.
type CertificateProblem int

// The certificate problems.
const (
	// CertificateUnknownAuthority: the certificate does not chain to an
	// authority the device trusts (DialOptions.CAFile, or the system's roots
	// when it is empty).
	CertificateUnknownAuthority CertificateProblem = iota + 1
	// CertificateNameMismatch: the certificate is not valid for the name or
	// address dialed.
	CertificateNameMismatch
	// CertificateExpired: the certificate has expired or is not valid yet,
	// by the device's clock.
	CertificateExpired
	// CertificateInvalid: the certificate is refused for another reason
	// (its use, its constraints, a malformed chain).
	CertificateInvalid
)

func (p CertificateProblem) String() string {
	switch p {
	case CertificateUnknownAuthority:
		return "unknown authority"
	case CertificateNameMismatch:
		return "name mismatch"
	case CertificateExpired:
		return "expired or not yet valid"
	case CertificateInvalid:
		return "invalid"
	}
	return fmt.Sprintf("CertificateProblem(%d)", int(p))
}

// CertificateError is the error of a call refused because the server's
// certificate failed verification. errors.Is(err, ErrCertificate) holds for
// it, and errors.As reaches the verification error of crypto/tls and
// crypto/x509 it carries.
type CertificateError struct {
	Problem CertificateProblem
	Err     error // the TLS handshake's verification error
}

func (e *CertificateError) Error() string {
	return fmt.Sprintf("%v (%v): %v", ErrCertificate, e.Problem, e.Err)
}

// Unwrap returns ErrCertificate and the verification error.
func (e *CertificateError) Unwrap() []error { return []error{ErrCertificate, e.Err} }

// ErrFork is returned (wrapped with the chain error that shows it) when the
// server's ledger no longer contains the point this device verified: it was
// restored from an older copy or rewritten. The device has pushed back
// everything it holds; the next sync continues in the server's new epoch.
var ErrFork = errors.New("client: the server's ledger forked from what this device verified")

// Errors a server returns. Every call this package makes to a server
// (Sync, Enroll, Resume, Export, and any call over a connection from Dial)
// returns a server's refusal as a *ServerError, which errors.Is matches
// against these by the reason the server gave, or by its gRPC code when the
// server gave none this package knows (ErrUnauthenticated,
// ErrPermissionDenied, ErrInvalidArgument, ErrNotFound, ErrUnavailable and
// ErrServerInternal by the codes of those names; context.Canceled and
// context.DeadlineExceeded by Canceled and DeadlineExceeded).
var (
	// ErrRevoked: the server revoked this device. Its pending entries stay
	// in the store and are listed by Outbox; enrol again with a new code.
	ErrRevoked = errors.New("client: the server revoked this device")
	// ErrUnauthenticated: the server does not know the device's token (or
	// the call carried none), or refused the proof of a resume.
	ErrUnauthenticated = errors.New("client: the server does not accept this device's credentials")
	// ErrCodeInvalid: the enrolment code is unknown, used or expired.
	ErrCodeInvalid = errors.New("client: the enrolment code is unknown, used or expired")
	// ErrNotMember: the device's user is not a member of the project. It is
	// also ErrPermissionDenied.
	ErrNotMember = errors.New("client: the user is not a member of the project")
	// ErrPermissionDenied: the call breaks a rule of who may do what; the
	// *ServerError's Rule names it.
	ErrPermissionDenied = errors.New("client: the server refused the call by a rule")
	// ErrInvalidArgument: a field of the request breaks a rule; the
	// *ServerError's Field names it.
	ErrInvalidArgument = errors.New("client: the server refused a field of the request")
	// ErrDeviceExists: the device id is enrolled already.
	ErrDeviceExists = errors.New("client: the device id is enrolled already")
	// ErrRateLimited: the device pushes faster than the server allows; sync
	// again a little later.
	ErrRateLimited = errors.New("client: the server asks the device to slow down")
	// ErrBatchTooLarge: a push held more events than the server takes at
	// once; sync with a smaller SyncOptions.BatchSize.
	ErrBatchTooLarge = errors.New("client: the push holds more events than the server takes at once")
	// ErrServerStorage: the server cannot write (its disk is full, its data
	// directory read-only, or its storage failed); nothing of the call was
	// stored. It is also ErrUnavailable: try again later.
	ErrServerStorage = errors.New("client: the server cannot store data now")
	// ErrUnavailable: the server cannot be reached or cannot serve the call
	// now; try again later.
	ErrUnavailable = errors.New("client: the server is unavailable")
	// ErrServerInternal: the server failed; its operator finds the cause
	// in its log.
	ErrServerInternal = errors.New("client: the server failed")
)

// serverReasons is the table of the reasons a server gives (its ErrorInfo
// detail, domain "tamp") and the errors of this package each matches.
var serverReasons = map[string][]error{
	"DEVICE_REVOKED":      {ErrRevoked},
	"TOKEN_REQUIRED":      {ErrUnauthenticated},
	"TOKEN_INVALID":       {ErrUnauthenticated},
	"CERTIFICATE_INVALID": {ErrUnauthenticated},
	"PROOF_INVALID":       {ErrUnauthenticated},
	"CODE_INVALID":        {ErrCodeInvalid},
	"NOT_A_MEMBER":        {ErrNotMember, ErrPermissionDenied},
	"PERMISSION_DENIED":   {ErrPermissionDenied},
	"INVALID_ARGUMENT":    {ErrInvalidArgument},
	"DEVICE_EXISTS":       {ErrDeviceExists},
	"NO_PROJECT":          {ErrNotFound},
	"NO_USER":             {ErrNotFound},
	"NO_DEVICE":           {ErrNotFound},
	"NO_INVITATION":       {ErrNotFound},
	"RATE_LIMITED":        {ErrRateLimited},
	"BATCH_TOO_LARGE":     {ErrBatchTooLarge},
	"STORAGE_FULL":        {ErrServerStorage, ErrUnavailable},
	"STORAGE_READ_ONLY":   {ErrServerStorage, ErrUnavailable},
	"STORAGE_IO":          {ErrServerStorage, ErrUnavailable},
	"INTERNAL":            {ErrServerInternal},
}

// serverCodes is the errors a status matches by its code when the table of
// reasons does not list its reason (a server or a proxy that gave none, a
// connection that failed, a call whose context ended). The reasons
// LEDGER_MOVED (Aborted, which Sync retries) and INVITATION_LAPSED
// (FailedPrecondition) match none: errors.As gives them.
var serverCodes = map[codes.Code][]error{
	codes.Canceled:         {context.Canceled},
	codes.DeadlineExceeded: {context.DeadlineExceeded},
	codes.Unauthenticated:  {ErrUnauthenticated},
	codes.PermissionDenied: {ErrPermissionDenied},
	codes.InvalidArgument:  {ErrInvalidArgument},
	codes.NotFound:         {ErrNotFound},
	codes.Unavailable:      {ErrUnavailable},
	codes.Internal:         {ErrServerInternal},
}

// ServerError is a call a server refused or failed: the gRPC status it
// returned, with the reason, field and rule of the status's ErrorInfo
// detail. errors.Is matches it against the errors of its reason (see
// ErrRevoked and those that follow it); errors.As gives it to a caller that
// wants the reason, the field or the rule. Message is for people: it may
// quote what a user typed, so escape it before printing it to a terminal.
type ServerError struct {
	Code    codes.Code // the gRPC code
	Reason  string     // e.g. "DEVICE_REVOKED"; empty when the status carried no reason
	Field   string     // the request field the refusal concerns, if any
	Rule    string     // the rule it breaks, if any, e.g. "member_of_project"
	Message string     // the server's message

	st *status.Status // as received, when it was
}

func (e *ServerError) Error() string {
	tag := e.Reason
	if tag == "" {
		tag = e.Code.String()
	}
	return e.Message + " [" + tag + "]"
}

// Unwrap returns the errors of this package the refusal matches: those the
// table of reasons lists for its reason, or else those of its code.
func (e *ServerError) Unwrap() []error {
	if errs, ok := serverReasons[e.Reason]; ok {
		return errs
	}
	return serverCodes[e.Code]
}

// GRPCStatus returns the status the server sent, so status.Code and
// status.FromError see through the error.
func (e *ServerError) GRPCStatus() *status.Status {
	if e.st != nil {
		return e.st
	}
	return status.New(e.Code, e.Message)
}
