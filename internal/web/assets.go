package web

import (
	"embed"
	"fmt"
	"html/template"
	"strconv"

	"tamp/internal/report"
)

// The page's templates and its style sheet, embedded in the binary.
//
//go:embed templates/*.html static/*
var assets embed.FS

// pageNames are the pages; each is parsed with the layout.
var pageNames = []string{"day.html", "test.html", "locations.html", "charts.html", "error.html",
	"queue.html", "audit.html", "frequency.html", "lots.html", "reconciliation.html", "print.html"}

// funcs are the few helpers the templates call; they format and build
// values, and never mark text as safe except the URLs the page composes
// from an encoded query string.
var funcs = template.FuncMap{
	"f":    func(x float64) string { return strconv.FormatFloat(x, 'f', 1, 64) },
	"add":  func(a, b float64) float64 { return a + b },
	"sub":  func(a, b float64) float64 { return a - b },
	"half": func(a, b float64) float64 { return (a + b) / 2 },
	"inc":  func(i int) int { return i + 1 },
	// rangeMethod says how the range on the bank volume still needed is
	// computed.
	"rangeMethod": func() string { return report.RangeMethod },
	// printURL and dayURL take a query that url.Values.Encode made.
	"printURL": func(q string) template.URL { return template.URL("/print?" + q) },
	"dayURL":   func(q string) template.URL { return template.URL("/day?" + q) },
	// judged is a judgement shown like a verdict: a glyph of class and a
	// word.
	"judged": func(class, word string) verdict { return verdict{Class: class, Word: word} },
	// verdictLabel is a verdict's glyph and word, for legends.
	"verdictLabel": func(class string) verdict {
		return verdict{Class: class, Word: map[string]string{"pass": "PASS", "fail": "FAIL", "pending": "NOT GRADED", "void": "VOIDED"}[class]}
	},
}

// parsePages parses each page with the layout.
func parsePages() (map[string]*template.Template, error) {
	out := map[string]*template.Template{}
	for _, name := range pageNames {
		files := []string{"templates/layout.html", "templates/" + name}
		t, err := template.New(name).Funcs(funcs).ParseFS(assets, files...)
		if err != nil {
			return nil, fmt.Errorf("web: parse %s: %w", name, err)
		}
		out[name] = t
	}
	return out, nil
}
