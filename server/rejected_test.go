package server_test

import (
	"context"
	"testing"
	"time"

	"tamp/client"
	"tamp/server"
)

// rejectedOf returns the device's rejected entry about record, failing the
// test when it holds none.
func rejectedOf(t *testing.T, s *client.Store, record string) client.Rejected {
	t.Helper()
	rs, err := s.Rejected(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range rs {
		if r.RecordID == record {
			return r
		}
	}
	t.Fatalf("no rejected entry about %s among %+v", record, rs)
	return client.Rejected{}
}

// A server's refusal of a pushed entry reaches the device's rejected
// entries with its reason and, apart, the field at fault or the rule
// broken: a program reads them there, never in the message.
func TestRejectedEntriesNameFieldOrRule(t *testing.T) {
	c := startCluster(t, t.TempDir())
	project := c.newProject("Bitterbrush Wash pad")
	ctx := context.Background()
	qa := c.device("quinn", server.QA)
	spec, ref := setUp(t, c, qa, project)
	syncOK(t, qa, c.conn(""), project)

	// A rule: an inspector may not add a laboratory reference.
	ann := c.device("ann", server.Inspector)
	refused, err := ann.AddReference(ctx, project, client.Reference{Material: "silty sand", Standard: client.ASTMD698, Method: "A",
		MaxDryDensity: pcf(112), OptimumMoisture: 14})
	if err != nil {
		t.Fatal(err)
	}
	if rep := syncOK(t, ann, c.conn(""), project); rep.Rejected != 1 {
		t.Fatalf("ann's sync: %+v, want her reference refused", rep)
	}
	if r := rejectedOf(t, ann, refused); r.Reason != "permission_denied" || r.Rule != "role_may_make_entry" || r.Field != "" || r.Message == "" {
		t.Errorf("a reference by an inspector: reason %q, rule %q, field %q, message %q; want permission_denied by role_may_make_entry",
			r.Reason, r.Rule, r.Field, r.Message)
	}

	// A field: a device whose clock runs three years ahead makes an entry
	// the server's clock bounds refuse, which the device cannot know of.
	ahead := func() time.Time { return time.Now().AddDate(3, 0, 0) }
	cal := c.deviceWith("cal", server.Inspector, client.Options{Now: ahead})
	syncOK(t, cal, c.conn(""), project)
	res, err := cal.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Readings: coneReadings(110, 12.5), Feature: "pad"})
	if err != nil {
		t.Fatal(err)
	}
	if rep := syncOK(t, cal, c.conn(""), project); rep.Rejected != 1 {
		t.Fatalf("cal's sync: %+v, want the test refused", rep)
	}
	if r := rejectedOf(t, cal, res.TestID); r.Reason != "invalid_field" || r.Field != "hlc" || r.Rule != "" {
		t.Errorf("a test dated three years ahead: reason %q, field %q, rule %q; want invalid_field naming hlc", r.Reason, r.Field, r.Rule)
	}

	// A device enrolled again for another user hands over none of the
	// first user's pending entries: they are refused by the same rule as
	// the server's.
	pending, err := ann.RecordTest(ctx, client.TestInput{Project: project, SpecID: spec, ReferenceID: ref, Readings: coneReadings(111, 12.5), Feature: "pad"})
	if err != nil {
		t.Fatal(err)
	}
	if err := ann.Enroll(ctx, c.conn(""), enrolmentCode(t, c, "bea", false), "ann's tablet, now bea's"); err != nil {
		t.Fatal(err)
	}
	if r := rejectedOf(t, ann, pending.TestID); r.Reason != "permission_denied" || r.Rule != "author_is_device_user" || r.Field != "" {
		t.Errorf("ann's test after the device was enrolled for bea: reason %q, rule %q, field %q; want permission_denied by author_is_device_user",
			r.Reason, r.Rule, r.Field)
	}
}
