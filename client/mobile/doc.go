// Package mobile is the facade over package client that gobind binds whole,
// for field apps on Android and iOS:
//
//	go tool gobind -lang=java,objc -outdir OUT tamp/client/mobile
//
// Its signatures hold only what gobind accepts: handles (*Store, *Cancel),
// strings, booleans, int64, float64, []byte, errors, and the callback
// interfaces Clock and SyncProgress, which the app implements. It is a thin
// layer: every call converts JSON to client's types, calls client, and
// converts the answer back.
//
// # JSON
//
// Structured data goes in and comes out as JSON, in schema version
// SchemaVersion. Field names are client's field names in snake case, the
// same as `tamp calc --json` where they overlap (dry_density,
// relative_compaction, moisture_deviation, verdict, reasons, flags with
// code and message, steps...). Values are SI, as in client: kg, m, m3,
// kg/m3, moisture and compaction in percent; times are RFC 3339; durations
// are nanoseconds (fields ending in _nanos). Every object the facade
// returns carries "schema" beside its payload, e.g.
//
//	{"schema": "tamp.mobile/1", "result": {"test_id": "...", "result": {"dry_density": 1794.1, ...}}}
//
// Inputs are the payload alone, e.g. RecordTest's
//
//	{"project": "...", "spec_id": "...", "reference_id": "...",
//	 "readings": {"sand_cone": {"sand_density": 1585.8, "sand_used": 3.175, "cone_correction": 0.240,
//	  "soil_mass": 3.679, "moisture": 11.1}}, "location": {"station": 381.0, "offset": -3.7}}
//
// A later schema version adds fields; it renames or removes none without
// changing the version.
//
// # Errors
//
// A call that fails returns an error whose text is a JSON object:
//
//	{"schema": "tamp.mobile/1", "reason": "DEVICE_REVOKED", "field": "", "rule": "", "message": "..."}
//
// reason is the server's reason code (google.rpc.ErrorInfo in domain tamp)
// for a refusal by the server, or one of the facade's own for a local
// one: INVALID_ENTRY (with the field), NOT_FOUND, NOT_AUTHOR, VOIDED,
// NOT_FAILING, REASON_REQUIRED, CANCELLED, CERTIFICATE, FORK, INVALID_JSON,
// ERROR. ErrorReason reads the reason from an error's text, so an app
// branches on the code, never on the message.
//
// # The app's part
//
// The app passes in the store's file path (in its own files directory),
// the server's address and its CA file, and a Clock if it wants to pin
// time. Cancel a sync or an enrolment from another thread with
// (*Cancel).Cancel. Nuclear gauges are licensed radioactive sources: their
// use, transport and storage follow the licensee's radiation-safety
// programme, outside this library; results need review by qualified
// personnel, and the project's specifications govern every limit.
package mobile
