package server

import "errors"

// Errors of the server and its Store.
var (
	ErrNoProject   = errors.New("server: no such project")
	ErrNoDevice    = errors.New("server: no such device")
	ErrCodeInvalid = errors.New("server: enrolment code is unknown, used or expired")
	ErrConflict    = errors.New("server: the ledger moved; retry")
	ErrNoUser      = errors.New("server: no such user")
	// ErrNoInvitation: no invitation by that id is pending.
	ErrNoInvitation = errors.New("server: no such pending invitation")
	// ErrDeviceExists: a device id is enrolled already; a device that
	// enrols again does so under a new id and key.
	ErrDeviceExists = errors.New("server: the device id is enrolled already")
)
