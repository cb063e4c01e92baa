// Package ledger is the event model that devices and the server share: the
// events of a project, their canonical bytes and Ed25519 signatures, the
// hash chain that proves nothing was altered, hybrid logical clocks, and the
// projection from a set of events to the project's state.
//
// # Events
//
// Every change is an immutable [Event]: a test recorded, corrected, voided
// or reviewed; a spec, reference, gauge, borrow source, placement or haul.
// Nothing is updated in place. An event's canonical bytes are the
// deterministic protobuf encoding of its body ([EncodeBody]); its device
// signs them ([Seal]), and they are kept byte for byte from then on, so the
// signature and the chain never depend on re-encoding. [Open] decodes a
// received event, verifies its signature and validates it; every refusal
// is a [*Rejection] naming a [Reason], the field and the rule.
//
// # New entries and history
//
// A new entry must pass more than a held one. [Admit] (which [Seal] runs on
// the device and the server runs on every pushed entry it does not hold)
// refuses values outside physical bounds ([MinDensity] to [MaxDensity] for
// a wet density in place, finite numbers everywhere, masses and volumes of
// a size a field test can have, a moisture of 0 to 100 %) and a clock
// before [MinWallTime]; the server also refuses an entry whose hybrid or
// device time runs more than [MaxTimeAhead] past its own clock
// ([CheckAhead]). Events a ledger already holds are read with [Validate]
// alone: a signed history cannot be changed, so a bound added later never
// makes a stored ledger unreadable.
//
// # Forward compatibility
//
// Because signed bytes are kept verbatim, an entry made by a newer version
// of tamp may carry fields (or enum values) this version does not know.
// Such an entry is refused as a new entry, with reason unknown_kind and
// the field's number, like an entry of an unknown kind: a replica cannot
// check, authorise or grade what it cannot read, and storing it would put
// into the ledger, under a valid signature, content every replica of this
// version silently ignores. So a change that adds a field to an event body
// ships to the server before the devices that write it. Entries already in
// a ledger are read as they are, unknown fields and all: an older device
// pulling a ledger that a newer server admitted keeps the bytes, verifies
// the chain and shows what it can read.
//
// # The chain
//
// The server numbers a project's events 1, 2, ... and links them:
// h(n) = SHA-256(h(n-1) || n || event bytes), h(0) = [Genesis]. A device
// keeps the [Checkpoint] (epoch, n, h(n)) it last verified and checks every
// pulled chunk with a [Verifier]: an altered event breaks the chain
// ([ErrChainBroken]), a reordered or truncated one leaves a gap
// ([ErrChainGap]), a server restored from an older copy is behind the
// checkpoint ([ErrRolledBack]) or reports an older epoch
// ([ErrEpochRolledBack]), and a rewritten history no longer contains the
// checkpoint ([ErrForked]).
//
// # The projection
//
// A [Projection] holds a set of events and the state they imply: every
// test with all its revisions, its current revision and its verdict, and
// the references, specs, equipment, borrow sources, placements and hauls.
// The state depends only on the set of events, never on the order or the
// number of times they arrived: each record is recomputed from all events
// about it, and where a rule must choose (two corrections of the same
// revision, two records with one id) it chooses by hybrid time, then device
// id, then event id, keeps both in history and flags the test for review.
// An event that refers to a record not yet held is kept and takes effect
// when that record arrives ([Waiting]); a test whose reference or spec is
// missing is shown as pending. Every test's result is recomputed from its
// raw readings against the reference and spec its revision names, with
// packages soil and qc, and a device's reported result that disagrees is
// flagged.
//
// Results support, and never replace, review by qualified personnel; the
// project's specifications and local codes govern every acceptance limit.
package ledger

import _ "time/tzdata" // project time zones resolve on any machine
