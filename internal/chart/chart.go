package chart

import (
	"bytes"
	"errors"
	"fmt"
	"image/color"
	"io"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"tamp/client"
	"tamp/internal/soil"
)

// The size every chart is drawn at, and the resolution of its PNG.
const (
	Width  = 8 * vg.Inch
	Height = 5.5 * vg.Inch
	DPI    = 120
)

// ErrNoData: there is nothing to draw (no maximum dry density, no graded
// test).
var ErrNoData = errors.New("chart: nothing to draw")

// Options say how a chart shows its values.
type Options struct {
	// Units is the unit system of the density axis: soil.US (pcf) or
	// soil.SI (kg/m3, the default).
	Units soil.System
	// Water is the density of water for the zero-air-voids line, kg/m3
	// (the project's choice); zero means 1000 kg/m3.
	Water float64
	// Location is the time zone of the run chart's time axis; nil means UTC.
	Location *time.Location
}

func (o Options) system() soil.System {
	if o.Units == soil.US {
		return soil.US
	}
	return soil.SI
}

func (o Options) water() float64 {
	if o.Water > 0 {
		return o.Water
	}
	return soil.Water1000
}

// Chart is a drawn chart, ready to render. Title and Series say what it
// shows: the title and the legend's entries, in order.
type Chart struct {
	Title  string
	Series []string
	p      *plot.Plot
	leg    plot.Legend // drawn beside the plot, not over the data
}

// WriteSVG renders the chart as SVG to w. Text is written as SVG text, so
// the title, axis labels and legend can be searched.
func (c *Chart) WriteSVG(w io.Writer) error {
	cv := vgsvg.NewWith(vgsvg.UseWH(Width, Height), vgsvg.EmbedFonts(false))
	c.draw(draw.New(cv))
	if _, err := cv.WriteTo(w); err != nil {
		return fmt.Errorf("chart: write svg: %w", err)
	}
	return nil
}

// WritePNG renders the chart as a PNG image of Width x Height at DPI to w.
func (c *Chart) WritePNG(w io.Writer) error {
	cv := vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(Width, Height), vgimg.UseDPI(DPI), vgimg.UseBackgroundColor(color.White))}
	c.draw(draw.New(cv))
	if _, err := cv.WriteTo(w); err != nil {
		return fmt.Errorf("chart: write png: %w", err)
	}
	return nil
}

// WriteFile renders the chart to path as SVG or PNG, by the path's
// extension (.svg or .png); any other extension is an error.
func (c *Chart) WriteFile(path string) error {
	var buf bytes.Buffer
	var err error
	switch strings.ToLower(filepath.Ext(path)) {
	case ".svg":
		err = c.WriteSVG(&buf)
	case ".png":
		err = c.WritePNG(&buf)
	default:
		return fmt.Errorf("chart: %s: the file name must end in .svg or .png", path)
	}
	if err != nil {
		return err
	}
	if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
		return fmt.Errorf("chart: %w", err)
	}
	return nil
}

// legend adds an entry to the chart's legend and remembers its name.
func (c *Chart) legend(name string, th ...plot.Thumbnailer) {
	c.leg.Add(name, th...)
	c.Series = append(c.Series, name)
}

// The margin round a chart and the gap between its plot and its legend.
const (
	margin    = 10 * vg.Millimeter / 2
	legendGap = 4 * vg.Millimeter
)

// draw draws the plot on the left of dc and the legend in a column on its
// right, below the title's height, so no entry hides a point.
func (c *Chart) draw(dc draw.Canvas) {
	dc = draw.Crop(dc, margin, -margin, margin, -margin)
	r := c.leg.Rectangle(dc)
	w := r.Max.X - r.Min.X
	c.p.Draw(draw.Crop(dc, 0, -(w + legendGap), 0, 0))
	c.leg.Draw(draw.Crop(dc, dc.Max.X-dc.Min.X-w, 0, 0, -c.p.Title.TextStyle.Height(c.p.Title.Text)-c.p.Title.Padding-vg.Points(6)))
}

// newChart starts a plot with the house style: white, a plain title, the
// legend at the top right.
func newChart(title, x, y string) *Chart {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font.Size = vg.Points(13)
	p.X.Label.Text = x
	p.Y.Label.Text = y
	p.X.Label.TextStyle.Font.Size = vg.Points(11)
	p.Y.Label.TextStyle.Font.Size = vg.Points(11)
	leg := plot.NewLegend()
	leg.Top, leg.Left = true, true
	leg.TextStyle.Font.Size = vg.Points(9)
	leg.Padding = vg.Points(3)
	p.BackgroundColor = color.White
	p.Add(plotter.NewGrid())
	return &Chart{Title: title, p: p, leg: leg}
}

// The colours. Shape and dash carry every meaning; colour repeats it.
var (
	ink       = color.Gray{Y: 0x20}
	passInk   = color.RGBA{R: 0x1f, G: 0x5a, B: 0x96, A: 0xff} // blue
	failInk   = color.RGBA{R: 0xc0, G: 0x3a, B: 0x10, A: 0xff} // brick red
	otherInk  = color.Gray{Y: 0x70}
	bandInk   = color.Gray{Y: 0xe4}
	whiteInk  = color.White
	limitInk  = color.RGBA{R: 0x8a, G: 0x2b, B: 0x7a, A: 0xff} // plum
	dashZAV   = []vg.Length{vg.Points(6), vg.Points(3)}
	dashLimit = []vg.Length{vg.Points(9), vg.Points(3), vg.Points(2), vg.Points(3)}
	dashBand  = []vg.Length{vg.Points(2), vg.Points(2)}
)

// The field tests' markers: a filled circle passes, a cross fails, an open
// triangle is not graded yet.
func passGlyph() draw.GlyphStyle {
	return draw.GlyphStyle{Color: passInk, Radius: vg.Points(3.5), Shape: draw.CircleGlyph{}}
}

func failGlyph() draw.GlyphStyle {
	return draw.GlyphStyle{Color: failInk, Radius: vg.Points(4.5), Shape: thickCross{}}
}

func pendingGlyph() draw.GlyphStyle {
	return draw.GlyphStyle{Color: otherInk, Radius: vg.Points(4), Shape: draw.TriangleGlyph{}}
}

// thickCross is an X drawn with a heavier line than draw.CrossGlyph, so it
// stands apart from a filled circle at print size.
type thickCross struct{}

func (thickCross) DrawGlyph(c *draw.Canvas, sty draw.GlyphStyle, pt vg.Point) {
	c.SetLineStyle(draw.LineStyle{Color: sty.Color, Width: vg.Points(1.6)})
	r := sty.Radius
	var p vg.Path
	p.Move(vg.Point{X: pt.X - r, Y: pt.Y - r})
	p.Line(vg.Point{X: pt.X + r, Y: pt.Y + r})
	c.Stroke(p)
	p = vg.Path{}
	p.Move(vg.Point{X: pt.X - r, Y: pt.Y + r})
	p.Line(vg.Point{X: pt.X + r, Y: pt.Y - r})
	c.Stroke(p)
}

// verdictSeries splits points by verdict into the field tests' scatters and
// adds those that have points, with their legend entries.
func (c *Chart) verdictSeries(pass, fail, pending plotter.XYs) error {
	for _, s := range []struct {
		name string
		xys  plotter.XYs
		sty  draw.GlyphStyle
	}{
		{fmt.Sprintf("Field test, passes (%d)", len(pass)), pass, passGlyph()},
		{fmt.Sprintf("Field test, fails (%d)", len(fail)), fail, failGlyph()},
		{fmt.Sprintf("Field test, not graded (%d)", len(pending)), pending, pendingGlyph()},
	} {
		if len(s.xys) == 0 {
			continue
		}
		sc, err := plotter.NewScatter(s.xys)
		if err != nil {
			return fmt.Errorf("chart: %w", err)
		}
		sc.GlyphStyle = s.sty
		c.p.Add(sc)
		c.legend(s.name, sc)
	}
	return nil
}

// limit parses a spec's limit as written ("95", "-2"); empty gives ok false.
func limit(field, s string) (v float64, ok bool, err error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return 0, false, nil
	}
	v, err = strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, false, fmt.Errorf("chart: spec %s %q: must be a number", field, s)
	}
	return v, true, nil
}

// specLabel names a spec for a title.
func specLabel(sp client.Spec) string {
	if sp.Name != "" {
		return sp.Name
	}
	return "no spec"
}
