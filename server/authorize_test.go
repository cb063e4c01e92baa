package server

import (
	"fmt"
	"os"
	"slices"
	"strings"
	"testing"

	pb "tamp/internal/gen/tamp/v1"
)

// Every kind of entry the wire format has is in the role table (with no
// roles when the server itself makes it), and the table names no other.
func TestEveryKindHasRoles(t *testing.T) {
	kinds := (&pb.EventBody{}).ProtoReflect().Descriptor().Oneofs().ByName("kind").Fields()
	for i := range kinds.Len() {
		name := string(kinds.Get(i).Name())
		if _, ok := entryRoles[name]; !ok {
			t.Errorf("entry kind %s is missing from the role table: give it its roles, or none when the server makes it", name)
		}
	}
	if len(entryRoles) != kinds.Len() {
		t.Errorf("the role table has %d kinds, the wire format %d", len(entryRoles), kinds.Len())
	}
}

// Every administration call has a rule in the table of administration
// calls, and the table names no other.
func TestEveryAdminCallHasARule(t *testing.T) {
	methods := pb.File_tamp_v1_admin_proto.Services().ByName("AdminService").Methods()
	for i := range methods.Len() {
		name := "/tamp.v1.AdminService/" + string(methods.Get(i).Name())
		if _, ok := adminCalls[name]; !ok {
			t.Errorf("administration call %s has no rule in adminCalls", name)
		}
	}
	if len(adminCalls) != methods.Len() {
		t.Errorf("adminCalls has %d rules, the service %d calls", len(adminCalls), methods.Len())
	}
}

// accessText says in words who may make a call of each access.
var accessText = map[access]string{
	serverAdmins:       "server administrators",
	projectAdmins:      "a server administrator, or an administrator of the project",
	projectMembers:     "a server administrator, or any member of the project",
	userAdmins:         "a server administrator; or an administrator of every project on which the user holds a role, never for a server administrator",
	ownOrServerAdmin:   "the user concerned, or a server administrator",
	own:                "the user concerned only",
	codeHolders:        "whoever holds a valid one-time code (no token)",
	certificateHolders: "a device proving its enrolment with its certificate and key (no token)",
}

// roleTables renders the role table and the table of administration calls
// as the README states them.
func roleTables() string {
	var b strings.Builder
	roles := []Role{Inspector, Office, QA, Admin}
	b.WriteString("| entry | inspector | office | qa | admin |\n|---|---|---|---|---|\n")
	kinds := (&pb.EventBody{}).ProtoReflect().Descriptor().Oneofs().ByName("kind").Fields()
	for i := range kinds.Len() {
		kind := string(kinds.Get(i).Name())
		allowed := entryRoles[kind]
		name := "`" + kind + "`"
		if len(allowed) == 0 {
			name += " (the server makes it)"
		}
		b.WriteString("| " + name + " |")
		for _, r := range roles {
			if slices.Contains(allowed, r) {
				b.WriteString(" yes |")
			} else {
				b.WriteString(" - |")
			}
		}
		b.WriteString("\n")
	}
	b.WriteString("\n| call | who may make it |\n|---|---|\n")
	methods := pb.File_tamp_v1_admin_proto.Services().ByName("AdminService").Methods()
	for i := range methods.Len() {
		m := string(methods.Get(i).Name())
		fmt.Fprintf(&b, "| `%s` | %s |\n", m, accessText[adminCalls["/tamp.v1.AdminService/"+m].access])
	}
	return b.String()
}

// The README states the role table and the table of administration calls
// as the server enforces them.
func TestReadmeStatesTheRoleTables(t *testing.T) {
	readme, err := os.ReadFile("../README.md")
	if err != nil {
		t.Fatal(err)
	}
	want := roleTables()
	if !strings.Contains(string(readme), want) {
		t.Errorf("README.md does not state the role tables as the server enforces them; its Security section should hold:\n\n%s", want)
	}
}
