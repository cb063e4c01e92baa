package server

import (
	"cmp"
	"context"
	"errors"
	"fmt"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// Every status the server returns carries a google.rpc.ErrorInfo detail in
// the domain "tamp": a reason code in upper snake case, and in its metadata
// the field ("field") and the rule ("rule") the refusal concerns, when it
// concerns one. Clients branch on the reason, never on the message, which
// is for people. This file is the one place the server makes a status: a
// test refuses status.Error, status.Errorf and status.New anywhere else in
// the package, and checks every statusError call against reasonCodes.

// errorDomain is the ErrorInfo domain of the server's reasons.
const errorDomain = "tamp"

// The ErrorInfo metadata keys.
const (
	metaField = "field"
	metaRule  = "rule"
)

// The reason codes. reasonCodes lists the gRPC codes each is sent with.
const (
	// reasonInvalidArgument: a request field breaks a rule (field names it;
	// rule, when set, names the rule).
	reasonInvalidArgument = "INVALID_ARGUMENT"
	// reasonTokenRequired: the call carries no bearer token.
	reasonTokenRequired = "TOKEN_REQUIRED"
	// reasonTokenInvalid: the server knows no device by the call's token
	// (it may have been restored from a copy older than the enrolment).
	reasonTokenInvalid = "TOKEN_INVALID"
	// reasonDeviceRevoked: the calling device was revoked.
	reasonDeviceRevoked = "DEVICE_REVOKED"
	// reasonCodeInvalid: the enrolment code is unknown, used or expired.
	reasonCodeInvalid = "CODE_INVALID"
	// reasonCertificateInvalid: a resume's certificate is not one this
	// server signed.
	reasonCertificateInvalid = "CERTIFICATE_INVALID"
	// reasonProofInvalid: a resume's proof does not verify, is out of the
	// server's time window, or was used before.
	reasonProofInvalid = "PROOF_INVALID"
	// reasonNotAMember: the caller's user is not a member of the project
	// (rule member_of_project).
	reasonNotAMember = "NOT_A_MEMBER"
	// reasonPermissionDenied: the caller may not make the call (rule names
	// the rule of the table of administration calls it breaks).
	reasonPermissionDenied = "PERMISSION_DENIED"
	// reasonDeviceExists: the device id is enrolled already.
	reasonDeviceExists = "DEVICE_EXISTS"
	// reasonNoProject, reasonNoUser, reasonNoDevice, reasonNoInvitation: no
	// such project, user, device or pending invitation (field names the id).
	reasonNoProject    = "NO_PROJECT"
	reasonNoUser       = "NO_USER"
	reasonNoDevice     = "NO_DEVICE"
	reasonNoInvitation = "NO_INVITATION"
	// reasonInvitationLapsed: the invitation's maker no longer administers
	// its project.
	reasonInvitationLapsed = "INVITATION_LAPSED"
	// reasonRateLimited: the device pushes faster than its rate (rule
	// push_rate).
	reasonRateLimited = "RATE_LIMITED"
	// reasonBatchTooLarge: a push holds more events than the server takes
	// at once (field events).
	reasonBatchTooLarge = "BATCH_TOO_LARGE"
	// reasonStorageFull, reasonStorageReadOnly, reasonStorageIO: the store
	// cannot write (ErrStorageFull, ErrStorageReadOnly, ErrStorageIO);
	// nothing of the call was stored; retry later.
	reasonStorageFull     = "STORAGE_FULL"
	reasonStorageReadOnly = "STORAGE_READ_ONLY"
	reasonStorageIO       = "STORAGE_IO"
	// reasonLedgerMoved: the project's ledger moved during a push; push
	// again.
	reasonLedgerMoved = "LEDGER_MOVED"
	// reasonInternal: the server failed; it logged the cause.
	reasonInternal = "INTERNAL"
	// reasonCancelled, reasonDeadlineExceeded: the call's context ended
	// before the call did.
	reasonCancelled        = "CANCELLED"
	reasonDeadlineExceeded = "DEADLINE_EXCEEDED"
)

// reasonCodes is the table of reasons: the gRPC codes each is sent with.
var reasonCodes = map[string][]codes.Code{
	reasonInvalidArgument:    {codes.InvalidArgument},
	reasonTokenRequired:      {codes.Unauthenticated},
	reasonTokenInvalid:       {codes.Unauthenticated},
	reasonDeviceRevoked:      {codes.Unauthenticated, codes.PermissionDenied}, // a call's token; a resume
	reasonCodeInvalid:        {codes.Unauthenticated},
	reasonCertificateInvalid: {codes.Unauthenticated},
	reasonProofInvalid:       {codes.Unauthenticated},
	reasonNotAMember:         {codes.PermissionDenied},
	reasonPermissionDenied:   {codes.PermissionDenied},
	reasonDeviceExists:       {codes.AlreadyExists},
	reasonNoProject:          {codes.NotFound},
	reasonNoUser:             {codes.NotFound},
	reasonNoDevice:           {codes.NotFound},
	reasonNoInvitation:       {codes.NotFound},
	reasonInvitationLapsed:   {codes.FailedPrecondition},
	reasonRateLimited:        {codes.ResourceExhausted},
	reasonBatchTooLarge:      {codes.ResourceExhausted},
	reasonStorageFull:        {codes.Unavailable},
	reasonStorageReadOnly:    {codes.Unavailable},
	reasonStorageIO:          {codes.Unavailable},
	reasonLedgerMoved:        {codes.Aborted},
	reasonInternal:           {codes.Internal},
	reasonCancelled:          {codes.Canceled},
	reasonDeadlineExceeded:   {codes.DeadlineExceeded},
}

// codeReasons is the reason of a status that gRPC or a service the server
// registers beside its own (health, reflection) returned without one: its
// code's name in upper snake case.
var codeReasons = map[codes.Code]string{
	codes.Canceled:           reasonCancelled,
	codes.Unknown:            "UNKNOWN",
	codes.InvalidArgument:    "INVALID_ARGUMENT",
	codes.DeadlineExceeded:   reasonDeadlineExceeded,
	codes.NotFound:           "NOT_FOUND",
	codes.AlreadyExists:      "ALREADY_EXISTS",
	codes.PermissionDenied:   "PERMISSION_DENIED",
	codes.ResourceExhausted:  "RESOURCE_EXHAUSTED",
	codes.FailedPrecondition: "FAILED_PRECONDITION",
	codes.Aborted:            "ABORTED",
	codes.OutOfRange:         "OUT_OF_RANGE",
	codes.Unimplemented:      "UNIMPLEMENTED",
	codes.Internal:           "INTERNAL",
	codes.Unavailable:        "UNAVAILABLE",
	codes.DataLoss:           "DATA_LOSS",
	codes.Unauthenticated:    "UNAUTHENTICATED",
}

// statusError returns a status error of code whose ErrorInfo detail names
// reason, and field and rule when set. Its message, for people, is msg after
// the field, or without one the rule: "user_id: no user u1".
func statusError(code codes.Code, reason, field, rule, msg string) error {
	if p := cmp.Or(field, rule); p != "" {
		msg = p + ": " + msg
	}
	return detailedStatus(code, msg, reason, field, rule).Err()
}

// detailedStatus returns a status of code with msg and an ErrorInfo detail.
func detailedStatus(code codes.Code, msg, reason, field, rule string) *status.Status {
	info := &errdetails.ErrorInfo{Domain: errorDomain, Reason: reason}
	for k, v := range map[string]string{metaField: field, metaRule: rule} {
		if v != "" {
			if info.Metadata == nil {
				info.Metadata = map[string]string{}
			}
			info.Metadata[k] = v
		}
	}
	st, err := status.New(code, msg).WithDetails(info)
	if err != nil { // only a status of code OK takes no details, and no caller makes one
		panic(fmt.Sprintf("server: status %v %s: %v", code, reason, err))
	}
	return st
}

// hasReason reports whether st carries the server's ErrorInfo detail.
func hasReason(st *status.Status) bool {
	for _, d := range st.Details() {
		if info, ok := d.(*errdetails.ErrorInfo); ok && info.GetDomain() == errorDomain {
			return true
		}
	}
	return false
}

// detailed returns the error a call ends with as a status carrying a reason:
// err itself when it carries one; a status without one (from gRPC, the
// health service, reflection) with the reason its code names; a context's
// error as Canceled or DeadlineExceeded; and any other error, which no
// handler should return, as Internal with a generic message, the error
// logged. It returns nil for nil.
func (s *Server) detailed(ctx context.Context, err error) error {
	if err == nil {
		return nil
	}
	st, ok := status.FromError(err)
	switch {
	case ok && hasReason(st):
		return err
	case ok:
		return detailedStatus(st.Code(), st.Message(), codeReasons[st.Code()], "", "").Err()
	case errors.Is(err, context.Canceled):
		return statusError(codes.Canceled, reasonCancelled, "", "", "the call was cancelled")
	case errors.Is(err, context.DeadlineExceeded):
		return statusError(codes.DeadlineExceeded, reasonDeadlineExceeded, "", "", "the call's deadline passed")
	}
	return s.internal(ctx, "call", err)
}

// internalError is the status of a failure inside the server, whose cause
// the server logs and does not send.
func internalError() error {
	return statusError(codes.Internal, reasonInternal, "", "", "internal error; the server logged the cause")
}
