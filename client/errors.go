package client

import "errors"

// Errors returned by the store's methods (wrapped; test with errors.Is).
var (
	// ErrClosed: the store was closed.
	ErrClosed = errors.New("client: store is closed")
	// ErrNotFound: no such test or event on this device.
	ErrNotFound = errors.New("client: not found")
	// ErrNotAuthor: only a test's author may correct or void it.
	ErrNotAuthor = errors.New("client: only the test's author may change it")
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
