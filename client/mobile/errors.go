package mobile

import (
	"context"
	"encoding/json"
	"errors"
	"strings"

	"tamp/client"
)

// The facade's own reason codes, beside the server's (which an error
// carries as the server sent them).
const (
	ReasonInvalidEntry   = "INVALID_ENTRY"   // the entry breaks a rule; field names it
	ReasonNotFound       = "NOT_FOUND"       // no such test or record on this device
	ReasonNotAuthor      = "NOT_AUTHOR"      // only a test's author may correct or void it
	ReasonVoided         = "VOIDED"          // the test was voided
	ReasonNotFailing     = "NOT_FAILING"     // only a failing test is retested
	ReasonRequired       = "REASON_REQUIRED" // a correction or a void needs its reason
	ReasonOwnTest        = "OWN_TEST"        // no one decides on their own test
	ReasonCancelled      = "CANCELLED"       // the call was cancelled
	ReasonCertificate    = "CERTIFICATE"     // the server's certificate failed verification
	ReasonFork           = "FORK"            // the server's ledger forked from what this device verified
	ReasonInvalidJSON    = "INVALID_JSON"    // the input is not the JSON the call takes
	ReasonNotEnrolled    = "NOT_ENROLLED"    // the device is not enrolled
	ReasonUnknownReport  = "UNKNOWN_REPORT"  // Report was given a name it does not know
	ReasonUnknownRecords = "UNKNOWN_RECORDS" // Records was given a kind it does not know
	ReasonOther          = "ERROR"           // anything else; message says what
)

// Error is the error of a failed call. Its text is the JSON of its fields,
// so that it reaches Java and Objective-C whole.
type Error struct {
	Reason  string `json:"reason"`
	Field   string `json:"field"`
	Rule    string `json:"rule"`
	Message string `json:"message"`
	err     error
}

func (e *Error) Error() string {
	b, _ := json.Marshal(struct {
		Schema string `json:"schema"`
		*Error
	}{SchemaVersion, e})
	return string(b)
}

func (e *Error) Unwrap() error { return e.err }

// ErrorReason returns the reason code of a failed call's error text (an
// Error's JSON), or ERROR for any other text.
func ErrorReason(text string) string {
	var e Error
	if err := json.Unmarshal([]byte(text), &e); err != nil || e.Reason == "" {
		return ReasonOther
	}
	return e.Reason
}

// wrap turns an error of package client into an Error with its reason.
func wrap(err error) error {
	if err == nil {
		return nil
	}
	var e *Error
	if errors.As(err, &e) {
		return err
	}
	out := &Error{Reason: ReasonOther, Message: err.Error(), err: err}
	var se *client.ServerError
	if errors.As(err, &se) {
		out.Reason, out.Field, out.Rule, out.Message = se.Reason, se.Field, se.Rule, se.Message
		return out
	}
	var ee *client.EntryError
	if errors.As(err, &ee) {
		out.Reason, out.Field, out.Rule = ReasonInvalidEntry, ee.Field, ee.Rule
	}
	for _, m := range []struct {
		err    error
		reason string
	}{
		{context.Canceled, ReasonCancelled}, {client.ErrCertificate, ReasonCertificate}, {client.ErrFork, ReasonFork},
		{client.ErrNotFound, ReasonNotFound}, {client.ErrNotAuthor, ReasonNotAuthor}, {client.ErrVoided, ReasonVoided},
		{client.ErrNotFailing, ReasonNotFailing}, {client.ErrReasonRequired, ReasonRequired}, {client.ErrOwnTest, ReasonOwnTest},
		{client.ErrNoUser, ReasonNotEnrolled},
	} {
		if errors.Is(err, m.err) {
			out.Reason = m.reason
			break
		}
	}
	return out
}

// bytesReader returns a reader of s.
func bytesReader(s string) *strings.Reader { return strings.NewReader(s) }
