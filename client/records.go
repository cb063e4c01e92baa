package client

import (
	"cmp"
	"slices"

	"tamp/internal/ledger"
)

// The project's records as this device holds them: the set-up, specs,
// laboratory references, equipment, borrow sources, placements, hauls and
// the people the ledger names, so that an app can show names where the
// entries hold ids. Like the reports, they are as recent as the device's
// last sync; each list is a copy the app may keep.

// Member is a user the project's ledger names, with the role their latest
// introduction to the project gives and the names of their devices.
type Member struct {
	UserID  string   `json:"user_id"`
	Name    string   `json:"name"`
	Role    string   `json:"role"`    // inspector, office, qa or admin; empty when the ledger gives none
	Devices []string `json:"devices"` // the devices' names, as enrolled; revoked ones included
}

// LabReference is a laboratory reference as the project holds it: the
// entry as recorded, the maximum dry density and optimum moisture that
// tests are graded against (as reported, or the peak fitted to the points),
// and what the fit found.
type LabReference struct {
	Reference
	GradingMaxDryDensity   float64   `json:"grading_max_dry_density"`  // kg/m3
	GradingOptimumMoisture float64   `json:"grading_optimum_moisture"` // percent
	Fitted                 bool      `json:"fitted"`                   // the grading values are the fitted peak
	Bracketed              bool      `json:"bracketed"`                // the points bracket the peak (true without points)
	Flags                  []Finding `json:"flags"`                    // for review: an unbracketed curve, points above zero air voids
	RecordedBy             string    `json:"recorded_by"`              // the user who added it
}

// EquipmentRecord is a registered piece of equipment: its latest
// registration, and the standard counts logged for it, in the order
// recorded.
type EquipmentRecord struct {
	Equipment
	Counts     []StandardCount `json:"counts"`
	RecordedBy string          `json:"recorded_by"` // the user who first registered it
}

// BorrowRecord is a borrow source with the mean dry density of its bank
// tests.
type BorrowRecord struct {
	BorrowSource
	BankDryDensity float64 `json:"bank_dry_density"` // kg/m3; zero when no bank test computes
	RecordedBy     string  `json:"recorded_by"`
}

// SetUp returns the project's set-up (the latest set-up entry), or false
// while none has reached the device.
func (s *Store) SetUp(project string) (ProjectSetUp, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	su := s.view(project).SetUp()
	if su == nil {
		return ProjectSetUp{}, false
	}
	return setUpOf(su.ProjectSetUp), true
}

// Members returns the users the project's ledger introduces (through the
// server's device_enrolled entries), sorted by name.
func (s *Store) Members(project string) []Member {
	s.mu.Lock()
	defer s.mu.Unlock()
	type seen struct {
		m   Member
		hlc ledger.HLC
	}
	users := map[string]*seen{}
	for _, d := range s.view(project).Snapshot().Devices {
		if d.UserID == "" {
			continue
		}
		u := users[d.UserID]
		if u == nil {
			u = &seen{m: Member{UserID: d.UserID, Name: d.UserName}}
			users[d.UserID] = u
		}
		if d.Name != "" {
			u.m.Devices = append(u.m.Devices, d.Name)
		}
		if d.Role != "" && (u.m.Role == "" || u.hlc.Compare(d.RoleHLC) < 0) {
			u.m.Role, u.hlc = d.Role, d.RoleHLC
		}
	}
	out := make([]Member, 0, len(users))
	for _, u := range users {
		slices.Sort(u.m.Devices)
		out = append(out, u.m)
	}
	slices.SortFunc(out, func(a, b Member) int { return cmp.Or(cmp.Compare(a.Name, b.Name), cmp.Compare(a.UserID, b.UserID)) })
	return out
}

// Specs returns the project's specifications, sorted by name.
func (s *Store) Specs(project string) []Spec {
	s.mu.Lock()
	defer s.mu.Unlock()
	specs := s.view(project).Snapshot().Specs
	out := make([]Spec, 0, len(specs))
	for _, sp := range specs {
		out = append(out, specOf(&sp.SpecDefined))
	}
	slices.SortStableFunc(out, func(a, b Spec) int { return cmp.Compare(a.Name, b.Name) })
	return out
}

// References returns the project's laboratory references, sorted by
// material and lab sample id.
func (s *Store) References(project string) []LabReference {
	s.mu.Lock()
	defer s.mu.Unlock()
	refs := s.view(project).Snapshot().References
	out := make([]LabReference, 0, len(refs))
	for _, r := range refs {
		out = append(out, labReferenceOf(r))
	}
	slices.SortStableFunc(out, func(a, b LabReference) int {
		return cmp.Or(cmp.Compare(a.Material, b.Material), cmp.Compare(a.LabSampleID, b.LabSampleID))
	})
	return out
}

// Equipment returns the project's equipment, sorted by kind and serial
// number.
func (s *Store) Equipment(project string) []EquipmentRecord {
	s.mu.Lock()
	defer s.mu.Unlock()
	eqs := s.view(project).Snapshot().Equipment
	out := make([]EquipmentRecord, 0, len(eqs))
	for _, e := range eqs {
		out = append(out, equipmentOf(e))
	}
	slices.SortStableFunc(out, func(a, b EquipmentRecord) int {
		return cmp.Or(cmp.Compare(a.Kind, b.Kind), cmp.Compare(a.SerialNumber, b.SerialNumber))
	})
	return out
}

// BorrowSources returns the project's borrow sources, sorted by name.
func (s *Store) BorrowSources(project string) []BorrowRecord {
	s.mu.Lock()
	defer s.mu.Unlock()
	bs := s.view(project).Snapshot().BorrowSource
	out := make([]BorrowRecord, 0, len(bs))
	for _, b := range bs {
		out = append(out, BorrowRecord{BorrowSource: borrowOf(&b.BorrowSourceMeasured), BankDryDensity: b.BankDryDensity, RecordedBy: b.Author})
	}
	slices.SortStableFunc(out, func(a, b BorrowRecord) int { return cmp.Compare(a.Name, b.Name) })
	return out
}

// Placements returns the project's lift placements, sorted by the day
// placed, feature and lift.
func (s *Store) Placements(project string) []Placement {
	s.mu.Lock()
	defer s.mu.Unlock()
	ps := s.view(project).Snapshot().Placements
	out := make([]Placement, 0, len(ps))
	for _, p := range ps {
		out = append(out, placementOf(p))
	}
	slices.SortStableFunc(out, func(a, b Placement) int {
		return cmp.Or(cmp.Compare(a.PlacedOn, b.PlacedOn), cmp.Compare(a.Feature, b.Feature), cmp.Compare(a.LiftNumber, b.LiftNumber))
	})
	return out
}

// Hauls returns the project's haul records, sorted by the day hauled.
func (s *Store) Hauls(project string) []Haul {
	s.mu.Lock()
	defer s.mu.Unlock()
	hs := s.view(project).Snapshot().Hauls
	out := make([]Haul, 0, len(hs))
	for _, h := range hs {
		out = append(out, haulOf(&h.HaulRecorded))
	}
	slices.SortStableFunc(out, func(a, b Haul) int { return cmp.Compare(a.HauledOn, b.HauledOn) })
	return out
}

// Tests returns every test the device holds of the project, voided ones
// included, in the order they were taken.
func (s *Store) Tests(project string) []Test {
	s.mu.Lock()
	defer s.mu.Unlock()
	v := s.view(project)
	return testsOf(v, byHLC(v.Tests(), func(*ledger.Test) bool { return true }))
}
