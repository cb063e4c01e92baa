package server

import "time"

// Dump is what a store keeps besides the ledgers' rows, whole, as one store
// hands it to another (tampd migrate: sqlitestore reads it, pgstore loads
// it). The ledgers' rows go separately, project by project, in order of
// sequence number, so that a large ledger is never held in memory.
type Dump struct {
	Projects    []DumpProject
	Users       []DumpUser
	Devices     []DumpDevice
	Codes       []DumpCode
	Members     []DumpMember
	Invitations []DumpInvitation
	// Identity is the server's signing identity; nil when the server has
	// none yet (it makes one at its first start).
	Identity *DumpIdentity
}

// DumpProject is a project and its chain head.
type DumpProject struct {
	Name    string
	Head    Checkpoint // its Project is the project's id
	Created time.Time
	// Rows is how many ledger rows the project has.
	Rows uint64
}

// DumpUser is a user.
type DumpUser struct {
	User
	Created time.Time
}

// DumpDevice is a device with its times; RevokedAt is zero for a device in
// service.
type DumpDevice struct {
	Device
	Enrolled  time.Time
	RevokedAt time.Time
}

// DumpCode is an enrolment code by its hash; Used is zero for a code not
// used yet.
type DumpCode struct {
	Hash    []byte
	User    string
	Expires time.Time
	Used    time.Time
}

// DumpMember is a user's role on a project.
type DumpMember struct {
	Project, User string
	Role          Role
}

// DumpInvitation is an invitation, pending or closed: State is pending,
// accepted or declined, and Resolved is zero while it is pending.
type DumpInvitation struct {
	Invitation
	State    string
	Resolved time.Time
}

// DumpIdentity is the server's signing identity: its device and user ids
// and its Ed25519 seed.
type DumpIdentity struct {
	DeviceID, UserID string
	Seed             []byte
}
