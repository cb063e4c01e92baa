package cli

import (
	"fmt"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"tamp/client"
	"tamp/internal/soil"
	"tamp/internal/words"
)

func newPlacement() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "placement", Short: "Record and list lift placements (office)"}
	f.register(c)

	var feature, from, to, borrow, placedOn, spec string
	var lift uint32
	var left, right, area, thickness, volume float64
	add := &cobra.Command{
		Use:   "add",
		Short: "Record a lift placed and compacted, with its compacted volume",
		Long: `Record a lift placed and compacted. Give its --volume (yd3 or m3), or its --area
(ft2 or m2) or stations and offsets, with its --thickness (in or mm), from
which the volume is the area times the thickness. Tests of the same feature
and lift join it. --borrow names the borrow source it came from, for the
volume reconciliation (tamp qa reconcile).`,
		Example: `  tamp placement add --feature embankment --lift 4 --from 12+00 --to 14+00 --left 30 --right 30 \
      --thickness 8 --borrow "Quarry Hill pit" --placed-on 2031-06-03`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			set := cmd.Flags().Changed
			if strings.TrimSpace(feature) == "" || !set("lift") {
				return failf("--feature, --lift: name the feature and the lift placed")
			}
			if !set("thickness") || thickness <= 0 {
				return failf("--thickness: give the compacted lift's thickness, in or mm")
			}
			if placedOn == "" {
				placedOn = time.Now().In(ss.loc).Format(time.DateOnly)
			} else if err := checkDate("placed-on", placedOn); err != nil {
				return err
			}
			p := client.Placement{Feature: feature, LiftNumber: lift, PlacedOn: placedOn, Thickness: ss.u.toSI(soil.Depth, thickness),
				Area: ss.u.areaToSI(area)}
			if set("from") || set("to") {
				if !set("from") || !set("to") {
					return failf("--from, --to: give both stations of the lift's extent")
				}
				a, err := ss.u.parseStation("from", from)
				if err != nil {
					return err
				}
				b, err := ss.u.parseStation("to", to)
				if err != nil {
					return err
				}
				p.Stations = &client.StationRange{From: a, To: b, OffsetLeft: -ss.u.toSI(soil.Length, left), OffsetRight: ss.u.toSI(soil.Length, right)}
				if p.Area == 0 && (left+right) > 0 {
					p.Area = (b - a) * (p.Stations.OffsetRight - p.Stations.OffsetLeft)
				}
			}
			switch {
			case set("volume"):
				p.CompactedVolume = ss.u.toSI(soil.Volume, volume)
			case p.Area > 0 && p.Thickness > 0:
				p.CompactedVolume = p.Area * p.Thickness
			default:
				return failf("--volume: give the compacted volume, or --thickness with --area (or --from, --to, --left, --right)")
			}
			if borrow != "" {
				b, err := ss.borrow(borrow)
				if err != nil {
					return err
				}
				p.BorrowSourceID = b.ID
			}
			if spec != "" {
				sp, err := ss.spec(spec)
				if err != nil {
					return err
				}
				p.SpecID = sp.ID
			}
			id, err := ss.s.RecordPlacement(cmd.Context(), ss.project, p)
			if err != nil {
				return entryError(cmd, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "placement %s recorded (%s): %s compacted, placed %s\n", quoted(placementName(p)), words.ShortID(id),
				ss.u.show(soil.Volume, p.CompactedVolume), placedOn)
			return err
		},
	}
	fl := add.Flags()
	fl.StringVar(&feature, "feature", "", "the feature, e.g. \"embankment\"")
	fl.Uint32Var(&lift, "lift", 0, "the lift number")
	fl.StringVar(&from, "from", "", "the lift's first station (12+00, or a number of ft or m)")
	fl.StringVar(&to, "to", "", "the lift's last station")
	fl.Float64Var(&left, "left", 0, "the lift's extent left of the alignment, ft or m")
	fl.Float64Var(&right, "right", 0, "the lift's extent right of the alignment, ft or m")
	fl.Float64Var(&area, "area", 0, "the lift's area, ft2 or m2")
	fl.Float64Var(&thickness, "thickness", 0, "the compacted lift's thickness, in or mm")
	fl.Float64Var(&volume, "volume", 0, "the compacted volume, yd3 or m3")
	fl.StringVar(&borrow, "borrow", "", "the borrow source the fill came from, by name")
	fl.StringVar(&placedOn, "placed-on", "", "the day placed, YYYY-MM-DD (default today)")
	fl.StringVar(&spec, "spec", "", "the spec the lift is tested against, by name, for its test frequency (tamp qa frequency)")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's placements", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			borrowName := map[string]string{}
			for _, b := range ss.s.BorrowSources(ss.project) {
				borrowName[b.ID] = b.Name
			}
			ps := ss.s.Placements(ss.project)
			if asJSON {
				type row struct {
					ID         string `json:"id"`
					Name       string `json:"name"`
					Feature    string `json:"feature"`
					Lift       uint32 `json:"lift"`
					PlacedOn   string `json:"placed_on"`
					From       string `json:"from,omitempty"`
					To         string `json:"to,omitempty"`
					Thickness  num    `json:"thickness"`
					Compacted  num    `json:"compacted_volume"`
					BorrowName string `json:"borrow_source"`
					Units      string `json:"units"`
				}
				rows := []row{}
				for _, p := range ps {
					r := row{ID: p.ID, Name: placementName(p), Feature: p.Feature, Lift: p.LiftNumber, PlacedOn: p.PlacedOn,
						Thickness: ss.u.num(soil.Depth, p.Thickness), Compacted: ss.u.num(soil.Volume, p.CompactedVolume),
						BorrowName: borrowName[p.BorrowSourceID], Units: ss.u.name()}
					if p.Stations != nil {
						r.From, r.To = ss.u.station(p.Stations.From), ss.u.station(p.Stations.To)
					}
					rows = append(rows, r)
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "PLACEMENT", "PLACED", "STATIONS", "THICKNESS", "COMPACTED VOLUME", "BORROW SOURCE", "ID")
			for _, p := range ps {
				st := "-"
				if p.Stations != nil {
					st = ss.u.station(p.Stations.From) + " to " + ss.u.station(p.Stations.To)
				}
				t.row(placementName(p), p.PlacedOn, st, ss.u.show(soil.Depth, p.Thickness), ss.u.show(soil.Volume, p.CompactedVolume),
					orDefault(borrowName[p.BorrowSourceID], "-"), words.ShortID(p.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)
	c.AddCommand(add, list)
	return c
}

func newHaul() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{Use: "haul", Short: "Record and list loads hauled from borrow (office)"}
	f.register(c)

	var borrow, placement, hauledOn string
	var loads uint32
	var perLoad float64
	add := &cobra.Command{
		Use:     "add",
		Short:   "Record loads hauled from a borrow source, with the loose volume of a load",
		Example: `  tamp haul add --borrow "Quarry Hill pit" --loads 42 --load-volume 12 --placement "embankment lift 4"`,
		Args:    cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if borrow == "" {
				return failf("--borrow: name the borrow source the loads came from (tamp borrow list)")
			}
			b, err := ss.borrow(borrow)
			if err != nil {
				return err
			}
			if hauledOn == "" {
				hauledOn = time.Now().In(ss.loc).Format(time.DateOnly)
			} else if err := checkDate("hauled-on", hauledOn); err != nil {
				return err
			}
			h := client.Haul{BorrowSourceID: b.ID, Loads: loads, LooseVolumePerLoad: ss.u.toSI(soil.Volume, perLoad), HauledOn: hauledOn}
			if placement != "" {
				p, err := ss.placement(placement)
				if err != nil {
					return err
				}
				h.PlacementID = p.ID
			}
			id, err := ss.s.RecordHaul(cmd.Context(), ss.project, h)
			if err != nil {
				return entryError(cmd, err)
			}
			_, err = fmt.Fprintf(cmd.OutOrStdout(), "haul recorded (%s): %d loads of %s loose from %s on %s, %s in all\n", words.ShortID(id), loads,
				ss.u.show(soil.Volume, h.LooseVolumePerLoad), quoted(b.Name), hauledOn, ss.u.show(soil.Volume, float64(loads)*h.LooseVolumePerLoad))
			return err
		},
	}
	fl := add.Flags()
	fl.StringVar(&borrow, "borrow", "", "the borrow source, by name")
	fl.Uint32Var(&loads, "loads", 0, "the number of loads")
	fl.Float64Var(&perLoad, "load-volume", 0, "the loose volume of one load, yd3 or m3")
	fl.StringVar(&placement, "placement", "", "the placement the loads went to, as \"FEATURE lift N\"")
	fl.StringVar(&hauledOn, "hauled-on", "", "the day hauled, YYYY-MM-DD (default today)")

	var asJSON bool
	list := &cobra.Command{
		Use: "list", Short: "List the project's hauls", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			borrowName, placeName := map[string]string{}, map[string]string{}
			for _, b := range ss.s.BorrowSources(ss.project) {
				borrowName[b.ID] = b.Name
			}
			for _, p := range ss.s.Placements(ss.project) {
				placeName[p.ID] = placementName(p)
			}
			hs := ss.s.Hauls(ss.project)
			if asJSON {
				type row struct {
					ID        string `json:"id"`
					Borrow    string `json:"borrow_source"`
					Loads     uint32 `json:"loads"`
					PerLoad   num    `json:"loose_volume_per_load"`
					Loose     num    `json:"loose_volume"`
					Placement string `json:"placement"`
					HauledOn  string `json:"hauled_on"`
					Units     string `json:"units"`
				}
				rows := []row{}
				for _, h := range hs {
					rows = append(rows, row{ID: h.ID, Borrow: borrowName[h.BorrowSourceID], Loads: h.Loads, PerLoad: ss.u.num(soil.Volume, h.LooseVolumePerLoad),
						Loose: ss.u.num(soil.Volume, float64(h.Loads)*h.LooseVolumePerLoad), Placement: placeName[h.PlacementID], HauledOn: h.HauledOn, Units: ss.u.name()})
				}
				return writeJSON(cmd.OutOrStdout(), rows)
			}
			t := newTable(cmd.OutOrStdout(), "HAULED", "BORROW SOURCE", "LOADS", "PER LOAD", "LOOSE VOLUME", "PLACEMENT", "ID")
			for _, h := range hs {
				t.row(h.HauledOn, orDefault(borrowName[h.BorrowSourceID], words.ShortID(h.BorrowSourceID)), strconv.Itoa(int(h.Loads)),
					ss.u.show(soil.Volume, h.LooseVolumePerLoad), ss.u.show(soil.Volume, float64(h.Loads)*h.LooseVolumePerLoad),
					orDefault(placeName[h.PlacementID], "-"), words.ShortID(h.ID))
			}
			return t.flush()
		},
	}
	jsonFlag(list, &asJSON)
	c.AddCommand(add, list)
	return c
}

func newReview() *cobra.Command {
	var f projectFlags
	c := &cobra.Command{
		Use:   "review",
		Short: "The office's review: the queue, approve a test, return it with a comment",
		Long: `Review the crew's tests: the queue lists the tests whose current revision awaits
the office (not approved; returned ones reappear once corrected). Approve a
test for the record, or return it to its inspector with a comment saying
why. No one reviews a test they recorded. Results support, and never
replace, review by qualified personnel.`,
	}
	f.register(c)

	var day string
	var asJSON bool
	queue := &cobra.Command{
		Use: "queue", Short: "List the tests awaiting review, oldest first", Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			ss, err := f.open(cmd.Context())
			if err != nil {
				return err
			}
			defer ss.close()
			if day != "" {
				if err := checkDate("day", day); err != nil {
					return err
				}
			}
			return ss.printTests(cmd, asJSON, ss.s.ReviewQueue(ss.project, day), "Nothing awaits review on this device (sync to get the crew's latest tests).")
		},
	}
	queue.Flags().StringVar(&day, "day", "", "only the tests taken that day, YYYY-MM-DD")
	jsonFlag(queue, &asJSON)

	decide := func(d client.Decision) *cobra.Command {
		var comment string
		use, short, example := "approve TEST [--comment TEXT]", "Approve a test for the record", `  tamp review approve 9f3c2a1b`
		if d == client.Return {
			use, short, example = "return TEST --comment WHY", "Return a test to its inspector with a comment saying why",
				`  tamp review return 9f3c2a1b --comment "station does not match the lift's extent; check the stake"`
		}
		cmd := &cobra.Command{
			Use: use, Short: short, Example: example, Args: cobra.ExactArgs(1),
			RunE: func(cmd *cobra.Command, args []string) error {
				ss, err := f.open(cmd.Context())
				if err != nil {
					return err
				}
				defer ss.close()
				t, err := ss.test(args[0])
				if err != nil {
					return err
				}
				if d == client.Return && strings.TrimSpace(comment) == "" {
					return failf("--comment: say why the test is returned, so its inspector can correct it")
				}
				if err := ss.s.ReviewTest(cmd.Context(), ss.project, t.ID, d, comment); err != nil {
					return ss.testError(cmd, t, err)
				}
				word := "approved"
				if d == client.Return {
					word = "returned to " + ss.who(t.Author)
				}
				_, err = fmt.Fprintf(cmd.OutOrStdout(), "test %s %s (%s, %s)\n", ss.testLabel(t.ID, t.Content), escape(word), verdictWord(t.Result.Verdict),
					methodShort[t.Result.Method])
				return err
			},
		}
		cmd.Flags().StringVar(&comment, "comment", "", "a comment for the inspector")
		return cmd
	}
	c.AddCommand(queue, decide(client.Approve), decide(client.Return))
	return c
}
