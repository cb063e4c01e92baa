package web

import (
	"bytes"
	"context"
	"crypto/rand"
	"encoding/base64"
	"errors"
	"fmt"
	"html/template"
	"io/fs"
	"log/slog"
	"net/http"
	"os"
	"time"

	"tamp/client"
	"tamp/internal/qc"
	"tamp/internal/soil"
	"tamp/internal/words"
)

// Options configure a Server.
type Options struct {
	// Store is the path of the device's store file. It must exist: the page
	// never creates a store.
	Store string
	// Project is the id of the project the page shows.
	Project string
	// Units is the unit system values are shown in: "us", "si", or "" for
	// the project's (SI when its set-up has not reached the device).
	Units string
	// Now is the clock (time.Now when nil); it decides which day is today.
	Now func() time.Time
	// Log receives the detail of errors that the page shows only in
	// general words (slog.Default when nil).
	Log *slog.Logger
}

// Server is the review page over one store and project. It is safe for
// concurrent use.
type Server struct {
	opts   Options
	units  soil.System // zero: the project's
	token  string      // the secret every form carries
	pages  map[string]*template.Template
	mux    *http.ServeMux
	origin *http.CrossOriginProtection
	log    *slog.Logger
}

// New returns the page over the store and project opts name. It returns an
// error when the store file does not exist or opts.Units is not us, si or
// empty; the store itself is opened for each request.
func New(opts Options) (*Server, error) {
	if _, err := os.Stat(opts.Store); err != nil {
		return nil, fmt.Errorf("web: store %s: %w", opts.Store, err)
	}
	if opts.Project == "" {
		return nil, errors.New("web: no project given")
	}
	s := &Server{opts: opts, log: opts.Log, origin: http.NewCrossOriginProtection()}
	if s.log == nil {
		s.log = slog.Default()
	}
	if s.opts.Now == nil {
		s.opts.Now = time.Now
	}
	if opts.Units != "" {
		sys, err := soil.ParseSystem(opts.Units)
		if err != nil {
			return nil, fmt.Errorf("web: units %q: must be us or si", opts.Units)
		}
		s.units = sys
	}
	secret := make([]byte, 32)
	if _, err := rand.Read(secret); err != nil {
		return nil, fmt.Errorf("web: token: %w", err)
	}
	s.token = base64.RawURLEncoding.EncodeToString(secret)
	var err error
	if s.pages, err = parsePages(); err != nil {
		return nil, err
	}
	s.routes()
	return s, nil
}

func (s *Server) routes() {
	m := http.NewServeMux()
	m.HandleFunc("GET /{$}", func(w http.ResponseWriter, r *http.Request) {
		http.Redirect(w, r, "/day", http.StatusSeeOther)
	})
	m.HandleFunc("GET /day", s.page(s.day))
	m.HandleFunc("GET /print", s.page(s.printDay))
	m.HandleFunc("GET /locations", s.page(s.locations))
	m.HandleFunc("GET /charts", s.page(s.charts))
	m.HandleFunc("GET /test/{id}", s.page(s.test))
	m.HandleFunc("POST /test/{id}/review", s.page(s.review))
	s.reportRoutes(m)
	static, _ := fs.Sub(assets, "static")
	m.Handle("GET /static/", http.StripPrefix("/static/", http.FileServerFS(static)))
	m.HandleFunc("/", func(w http.ResponseWriter, r *http.Request) {
		s.fail(w, r, nil, notFound("There is no page at this address."))
	})
	s.mux = m
}

// ServeHTTP answers a request: the host check, the security headers, then
// the page.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	// No script runs, no page may frame this one, forms post only here;
	// style attributes are allowed for the charts' SVG.
	h.Set("Content-Security-Policy", "default-src 'none'; style-src-elem 'self'; style-src-attr 'unsafe-inline'; img-src 'self' data:; "+
		"form-action 'self'; frame-ancestors 'none'; base-uri 'none'")
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("X-Frame-Options", "DENY")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Cache-Control", "no-store")
	if r.TLS == nil && !loopbackHost(r.Host) {
		// Plain HTTP is served on loopback only (Listen); a request naming
		// another host came through a name someone else controls.
		http.Error(w, "tamp web answers plain HTTP only to a loopback name: localhost, 127.0.0.1 or [::1]", http.StatusMisdirectedRequest)
		return
	}
	s.mux.ServeHTTP(w, r)
}

// view is one request's look at the store: opened for the request, closed
// after it.
type view struct {
	st      *client.Store
	project string
	name    string // the project's name, or its id before its set-up arrives
	u       units
	loc     *time.Location
	members map[string]client.Member
	now     time.Time
}

// open opens the store for one request.
func (s *Server) open(ctx context.Context) (*view, error) {
	if _, err := os.Stat(s.opts.Store); err != nil { // never create a store in its place
		return nil, fmt.Errorf("web: store %s: %w", s.opts.Store, err)
	}
	st, err := client.Open(ctx, s.opts.Store, client.Options{Now: s.opts.Now})
	if err != nil {
		return nil, err
	}
	v := &view{st: st, project: s.opts.Project, name: s.opts.Project, loc: time.UTC, members: map[string]client.Member{}, now: s.opts.Now()}
	su, ok := st.SetUp(v.project)
	if ok && su.Name != "" {
		v.name = visible(su.Name)
	}
	v.u = units{soil.SI}
	switch {
	case s.units != 0:
		v.u = units{s.units}
	case su.Units == client.USCustomary:
		v.u = units{soil.US}
	}
	if su.TimeZone != "" {
		if l, err := time.LoadLocation(su.TimeZone); err == nil {
			v.loc = l
		}
	}
	for _, m := range st.Members(v.project) {
		v.members[m.UserID] = m
	}
	return v, nil
}

func (v *view) close() { v.st.Close() }

// who names a user by the name the ledger gives them.
func (v *view) who(id string) string {
	if m, ok := v.members[id]; ok && m.Name != "" {
		return visible(m.Name)
	}
	if id == "" {
		return "-"
	}
	return "user " + words.ShortID(id)
}

// today is today's date in the project's time zone.
func (v *view) today() string { return v.now.In(v.loc).Format(time.DateOnly) }

// handler is a page's work on an open view.
type handler func(w http.ResponseWriter, r *http.Request, v *view) error

// page opens the store for a request, runs h and closes the store.
func (s *Server) page(h handler) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		v, err := s.open(r.Context())
		if err != nil {
			s.fail(w, r, nil, err)
			return
		}
		defer v.close()
		if err := h(w, r, v); err != nil {
			s.fail(w, r, v, err)
		}
	}
}

// frame is what every page shows round its own content.
type frame struct {
	Title    string
	Nav      string // the menu entry of this page
	Day      string // the day the menu's day links carry
	Project  string
	Units    string
	User     string // who the page's reviews are signed for
	Outbox   int    // entries of this device waiting for tamp sync
	Token    string
	Notice   string // a line of news after a write
	Cautions []string
	Rounding string
	Page     any
}

// frame starts a page's frame.
func (s *Server) frame(r *http.Request, v *view, title, nav, day string, page any) frame {
	f := frame{Title: title, Nav: nav, Day: day, Token: s.token, Cautions: []string{qc.NuclearCaution, qc.Caution},
		Rounding: qc.RoundingNote, Page: page}
	if v != nil {
		f.Project, f.Units = v.name, v.u.name()
		user := v.st.User()
		f.User = v.who(user)
		if m, ok := v.members[user]; ok && m.Role != "" {
			f.User += " (" + visible(m.Role) + ")"
		}
		if o, err := v.st.Outbox(r.Context()); err == nil {
			f.Outbox = o.Pending
		} else {
			s.log.Error("tamp web: outbox", "err", err)
		}
	}
	return f
}

// render executes a page's template into a buffer, then writes it.
func (s *Server) render(w http.ResponseWriter, status int, name string, f frame) error {
	t, ok := s.pages[name]
	if !ok {
		return fmt.Errorf("web: no page template %s", name)
	}
	var b bytes.Buffer
	if err := t.ExecuteTemplate(&b, "page", f); err != nil {
		return fmt.Errorf("web: render %s: %w", name, err)
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.WriteHeader(status)
	_, err := w.Write(b.Bytes())
	return err
}

// pageError is an error the page explains in its own words, with its
// HTTP status.
type pageError struct {
	Status  int
	Title   string
	Message string
}

func (e *pageError) Error() string { return e.Message }

func notFound(msg string) error   { return &pageError{http.StatusNotFound, "Not found", msg} }
func badRequest(msg string) error { return &pageError{http.StatusBadRequest, "Not understood", msg} }
func forbidden(msg string) error  { return &pageError{http.StatusForbidden, "Refused", msg} }

// fail shows err as a page: a pageError in its own words, any other error
// in general words, its detail in the log.
func (s *Server) fail(w http.ResponseWriter, r *http.Request, v *view, err error) {
	pe, ok := err.(*pageError)
	if !ok {
		s.log.Error("tamp web", "method", r.Method, "path", r.URL.Path, "err", err)
		pe = &pageError{http.StatusInternalServerError, "Something went wrong",
			"The page could not read or write the store. The terminal running tamp web says why; nothing was lost."}
	}
	if err := s.render(w, pe.Status, "error.html", s.frame(r, v, pe.Title, "", "", pe)); err != nil {
		s.log.Error("tamp web: error page", "err", err)
		http.Error(w, pe.Message, pe.Status)
	}
}
