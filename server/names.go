package server

import (
	"fmt"

	"google.golang.org/grpc/codes"
)

// checkName refuses a name (of a project, user or device) holding a
// character that could forge a line or drive a terminal where names are
// listed: a C0 control (newline and tab included), DEL, a C1 control, a
// bidirectional control (U+061C, U+200E, U+200F, U+202A-U+202E,
// U+2066-U+2069) or a line or paragraph separator (U+2028, U+2029). It
// returns InvalidArgument naming field, the character and its position, or
// nil. Letters of any script, and joiners, are accepted.
func checkName(field, name string) error {
	for i, r := range name {
		if nameControl(r) {
			return statusError(codes.InvalidArgument, reasonInvalidArgument, field, "no_control_characters",
				fmt.Sprintf("must not hold control characters (%U at byte %d)", r, i))
		}
	}
	return nil
}

func nameControl(r rune) bool {
	switch {
	case r < 0x20, r >= 0x7f && r <= 0x9f:
		return true
	case r == 0x061c, r == 0x200e, r == 0x200f:
		return true
	case r >= 0x202a && r <= 0x202e, r >= 0x2066 && r <= 0x2069:
		return true
	case r == 0x2028, r == 0x2029:
		return true
	}
	return false
}
