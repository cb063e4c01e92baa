package server

import "google.golang.org/grpc/codes"

// StatusError makes a status as the server does, for the tests of package
// server_test that check every reason crosses the wire.
var StatusError = statusError

// ReasonCodes returns the table of reasons: the gRPC codes each is sent with.
func ReasonCodes() map[string][]codes.Code { return reasonCodes }
