package client

import (
	"errors"
	"fmt"
)

// Errors returned by the store's methods (wrapped; test with errors.Is).
var (
	// ErrClosed: the store was closed.
	ErrClosed = errors.New("client: store is closed")
	// ErrNotFound: no such test or event on this device.
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
	// ErrInvalid: the entry breaks a rule; the error names the field.
	ErrInvalid = errors.New("client: invalid entry")
	// ErrNotRejected: only an event the server rejected can be discarded.
	ErrNotRejected = errors.New("client: the event was not rejected")
)

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
