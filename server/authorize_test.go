package server

import (
	"testing"

	pb "tamp/internal/gen/tamp/v1"
)

// Every kind of entry the wire format has is given its roles.
func TestEveryKindHasRoles(t *testing.T) {
	kinds := (&pb.EventBody{}).ProtoReflect().Descriptor().Oneofs().ByName("kind").Fields()
	for i := range kinds.Len() {
		name := string(kinds.Get(i).Name())
		if len(entryRoles[name]) == 0 {
			t.Errorf("entry kind %s has no roles", name)
		}
	}
	if len(entryRoles) != kinds.Len() {
		t.Errorf("%d kinds have roles, the wire format has %d", len(entryRoles), kinds.Len())
	}
}
