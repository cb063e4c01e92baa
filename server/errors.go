package server

import "errors"

// Errors of the server and its Store.
var (
	ErrNoProject   = errors.New("server: no such project")
	ErrNoDevice    = errors.New("server: no such device")
	ErrCodeInvalid = errors.New("server: enrolment code is unknown, used or expired")
	ErrConflict    = errors.New("server: the ledger moved; retry")
	ErrNoUser      = errors.New("server: no such user")
)
