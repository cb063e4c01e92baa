// Package client is the field library of tamp: the store an inspector's
// tablet or laptop keeps tests in, offline, and computes results with on the
// spot.
//
// A [Store] is one SQLite file (modernc.org/sqlite, WAL, one writer
// connection, foreign keys and a busy timeout set per connection, schema
// migrations embedded and run on open). It holds the device's identity (an
// Ed25519 key made on first open, the device id, its sequence counter and
// hybrid logical clock) and every event the device holds, its own and those
// synced from the server, as the signed bytes they travel as. The views an
// inspector sees (today's tests, open failures, a test's history) are the
// shared ledger projection over those events, rebuilt on open and updated
// with every entry, so a result computed offline is the result the office
// will see.
//
// # Recording
//
// [Store.RecordTest] records a test of any method (nuclear gauge, sand
// cone, drive cylinder, rubber balloon, or a wet density as measured) with
// its location, lift, reference, spec and gauge, in one transaction, and
// returns dry density, relative compaction, moisture deviation, the verdict,
// its reasons and flags at once. A test whose reference has not reached the
// device is kept with the verdict pending and graded when it arrives.
// [Store.CorrectTest] records a new revision with its reason; the first stays
// in history. [Store.VoidTest] withdraws a test with a reason.
// [Store.RecordRetest] retests a failing test, taking its location, lift,
// reference and spec. Only a test's author may correct or void it; office
// reviews are separate entries.
//
// Every other entry a role makes has its own method: the set-up
// ([Store.SetUpProject]); QA's specs, laboratory references, borrow sources,
// moisture corrections and accepted exceptions ([Store.DefineSpec],
// [Store.AddReference], [Store.MeasureBorrowSource],
// [Store.SetMoistureCorrection], [Store.AcceptException]); the office's
// equipment, placements, hauls and reviews ([Store.RegisterEquipment],
// [Store.RecordPlacement], [Store.RecordHaul], [Store.ReviewTest]); and the
// inspector's daily standard counts ([Store.RecordStandardCount]). An entry
// that breaks a rule is refused with an [*EntryError] naming the field (or,
// for an entry the user may not make, the rule) as a server names it, and
// nothing is stored; errors.Is matches it to [ErrInvalid] or to the error
// the method documents.
//
// The package's types are its own: readings, locations, records, results
// and reports are plain values in SI units (kg, m, m3, kg/m3, percent),
// with words for choices, so an app names every value it passes or
// receives. Apps convert units at their edges.
//
// Nuclear gauges are licensed radioactive sources: their use, transport and
// storage follow the licensee's radiation-safety programme. Results support,
// and never replace, review by qualified personnel; the project's
// specifications and local codes govern every acceptance limit.
//
// # Reading
//
// [Store.Test] returns a test with its history (revisions with their
// reasons and authors, voids, reviews, exceptions, retests, flags, records
// the device lacks). [Store.Today], [Store.TestsOn], [Store.OpenFailures] and
// [Store.Conflicts] list tests; [Store.Rejected] the entries the server
// refused and why; [Store.Status] the sync. The reports of the read side
// ([Store.ReviewQueue], [Store.RetestAudit], [Store.Frequency], [Store.Lots],
// [Store.Reconcile]) are computed from the device's own copy of the ledger
// with the code the server runs, so an office laptop that holds a project
// answers them offline as the server would.
//
// # Durability and speed
//
// The store runs with [DurabilityFull] (SQLite synchronous=FULL) by
// default, because field devices lose power: a test reported recorded is on
// disk. A test kills a process writing in a loop at random moments and
// checks, each time, that the store opens, passes PRAGMA integrity_check
// and holds every entry reported committed, whole and correctly signed.
// Measured on the project's 2-core machine (go test -run XXX -bench
// RecordTest -benchtime 2000x ./client), recording a test takes:
//
//	DurabilityFull       median 0.42 ms, 99th percentile 1.7 ms
//	DurabilityNormal     median 0.17 ms, 99th percentile 1.0 ms
//
// and opening a store of 100,000 tests, which rebuilds its views, about
// 0.7 s (BenchmarkOpen). Figures on a tablet's flash storage will differ.
//
// # Syncing
//
// [Store.Sync] pulls and verifies the project's ledger, pushes, and pulls
// again. An entry the server acknowledged counts as confirmed only once the
// device has pulled it back at its place in the chain it verified; until
// then it is offered again at every push (pushing is idempotent), so a
// server restored from an older copy gets back what it lost from every
// device that holds it, whichever device notices the restore. Entries
// already confirmed are never pushed again. The server also lists entries
// it lacks (a gap in a device's sequence); a device holding them pushes
// them in the same sync. [Store.Status] says how many entries await
// confirmation, how many the server lacks, which entries it asked for that
// the device does not hold, and which entries have waited longer than
// [Options] WaitLimit for records the server never received.
//
// # Errors from the server
//
// A server's refusal, from [Store.Sync], [Store.Enroll], [Store.Resume],
// [Store.Export] or any call over a connection from [Dial], is a
// [*ServerError] carrying the reason code, field and rule the server sent.
// errors.Is matches it against this package's errors by its reason
// ([ErrRevoked], [ErrNotMember], [ErrCodeInvalid], [ErrServerStorage]...),
// and errors.As gives the reason, field and rule; no caller needs to read
// its message, which is for people.
//
// The device key is kept in the store file; protecting the file at rest is
// left to the device's disk encryption.
package client
