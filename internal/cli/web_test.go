package cli

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"html"
	"io"
	"net/http"
	"net/http/httptest"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/cdproto/cdp"
	"github.com/chromedp/cdproto/emulation"
	"github.com/chromedp/chromedp"

	"tamp/client"
	"tamp/internal/words"
)

// startWeb runs tamp web on store, on a free loopback port, in this
// process, and returns the address it prints. The server stops when the
// test ends; its error, if any, fails the test.
func startWeb(t *testing.T, store string, extra ...string) string {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	pr, pw := io.Pipe()
	var stderr bytes.Buffer
	done := make(chan error, 1)
	go func() {
		err := Run(ctx, append([]string{"web", "--store", store, "--listen", "127.0.0.1:0"}, extra...), pw, &stderr)
		pw.CloseWithError(io.EOF)
		done <- err
	}()
	t.Cleanup(func() {
		cancel()
		select {
		case err := <-done:
			if err != nil {
				t.Errorf("tamp web ended with %v\n%s", err, stderr.String())
			}
		case <-time.After(15 * time.Second):
			t.Errorf("tamp web did not stop within 15 s of its context's end")
		}
	})
	served := regexp.MustCompile(`serving on (http://127\.0\.0\.1:\d+/)`)
	sc := bufio.NewScanner(pr)
	var printed []string
	for sc.Scan() {
		printed = append(printed, sc.Text())
		if m := served.FindStringSubmatch(sc.Text()); m != nil {
			go io.Copy(io.Discard, pr) // keep the writer from blocking
			return m[1]
		}
	}
	t.Fatalf("tamp web printed no address: %q; stderr %s; %v", printed, stderr.String(), <-done)
	return ""
}

// chromium returns the path of Debian's chromium, or skips the test
// (outside CI) with how to install it.
func chromium(t *testing.T) string {
	t.Helper()
	for _, p := range []string{"/usr/bin/chromium", "chromium"} {
		if path, err := exec.LookPath(p); err == nil {
			return path
		}
	}
	msg := "the browser test needs Chromium: install Debian's package with apt-get install chromium (.ci/run does), then run go test ./internal/cli -run TestWeb"
	if os.Getenv("TAMP_CI") != "" {
		t.Fatal(msg)
	}
	t.Skip(msg)
	return ""
}

// screenshots returns the directory the browser test writes its
// screenshots to: $TAMP_SCREENSHOTS when set (created if need be), else a
// temporary directory that goes with the test.
func screenshots(t *testing.T) string {
	t.Helper()
	dir := os.Getenv("TAMP_SCREENSHOTS")
	if dir == "" {
		return t.TempDir()
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	return dir
}

// browser starts headless Chromium for the test.
func browser(t *testing.T) context.Context {
	t.Helper()
	opts := append(chromedp.DefaultExecAllocatorOptions[:], chromedp.ExecPath(chromium(t)), chromedp.NoSandbox, chromedp.Headless,
		chromedp.DisableGPU, chromedp.WindowSize(1280, 900))
	actx, cancelAlloc := chromedp.NewExecAllocator(context.Background(), opts...)
	ctx, cancelTab := chromedp.NewContext(actx)
	ctx, cancelTime := context.WithTimeout(ctx, 3*time.Minute)
	t.Cleanup(func() { cancelTime(); cancelTab(); cancelAlloc() })
	return ctx
}

// shot saves a full-page PNG of what the browser shows, and logs where.
func shot(t *testing.T, ctx context.Context, dir, name string) {
	t.Helper()
	png, err := chromedp.Run(ctx, chromedp.FullScreenshot(100))
	if err != nil {
		t.Fatalf("screenshot %s: %v", name, err)
	}
	p := filepath.Join(dir, name)
	if err := os.WriteFile(p, png, 0o644); err != nil {
		t.Fatal(err)
	}
	t.Logf("screenshot: %s", p)
}

// open navigates and checks the page answered 200.
func open(t *testing.T, ctx context.Context, u string) {
	t.Helper()
	resp, err := chromedp.Run(ctx, chromedp.NavigateResponse(u))
	if err != nil {
		t.Fatalf("open %s: %v", u, err)
	}
	if resp.Status != http.StatusOK {
		t.Fatalf("open %s: status %d", u, resp.Status)
	}
}

func evaluate[T any](t *testing.T, ctx context.Context, js string) T {
	t.Helper()
	v, err := chromedp.Run(ctx, chromedp.Evaluate[T](js))
	if err != nil {
		t.Fatalf("evaluate %s: %v", js, err)
	}
	return v
}

// TestWebReviewInBrowser is the office's review in a real browser: tamp
// web on the store the demo leaves, the day's list filtered to failures, a
// failing test opened and returned with a comment; the review is then read
// from the store by a second opener of the same file, and counted in the
// outbox. A screenshot of each page is saved for a person to look at
// (TAMP_SCREENSHOTS names the directory), and the print view is checked to
// fit A4 and Letter.
func TestWebReviewInBrowser(t *testing.T) {
	ctx := browser(t)
	dir := t.TempDir()
	runDemo(t, "--out", dir)
	store := filepath.Join(dir, "office.db")
	base := startWeb(t, store)
	pics := screenshots(t)

	// The day's list: the demo's day, found by the page itself.
	open(t, ctx, base)
	if title := evaluate[string](t, ctx, `document.title`); !strings.Contains(title, "Tests of "+demoDate) {
		t.Errorf("the first page's title is %q, want the tests of the demo's day %s", title, demoDate)
	}
	all := evaluate[int](t, ctx, `document.querySelectorAll("table.tests tbody tr").length`)
	if all < 10 {
		t.Errorf("the day's list shows %d tests, want the demo's day (more than 10)", all)
	}
	shot(t, ctx, pics, "01-day.png")
	// The keyboard reaches the page through a real link first, and sees
	// where it is.
	if err := chromedp.Do(ctx, chromedp.KeyEvent("\t")); err != nil {
		t.Fatal(err)
	}
	if got := evaluate[string](t, ctx, `document.activeElement.textContent`); got != "Skip to the content" {
		t.Errorf("the first Tab focuses %q, want the skip link", got)
	}
	if outline := evaluate[string](t, ctx, `getComputedStyle(document.activeElement).outlineStyle`); outline == "none" {
		t.Errorf("the focused link shows no outline")
	}
	open(t, ctx, base+"queue")
	if n := evaluate[int](t, ctx, `document.querySelectorAll("table.tests tbody tr").length`); n != 1 {
		t.Errorf("the review queue holds %d tests, want the demo's open failure", n)
	}
	shot(t, ctx, pics, "02-queue.png")
	open(t, ctx, base)

	// Filter to failures with the form, as a person does.
	if err := chromedp.Do(ctx, chromedp.SetValue(chromedp.CSS(`select[name="verdict"]`), "fail")); err != nil {
		t.Fatal(err)
	}
	if _, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.CSS(`form.filters button[type="submit"]`))); err != nil {
		t.Fatal(err)
	}
	loc := evaluate[string](t, ctx, `location.href`)
	if !strings.Contains(loc, "verdict=fail") {
		t.Errorf("after filtering the page is %s, want verdict=fail in the address", loc)
	}
	rows := evaluate[int](t, ctx, `document.querySelectorAll("table.tests tbody tr").length`)
	failing := evaluate[int](t, ctx, `document.querySelectorAll("table.tests tbody tr.r-fail").length`)
	sayFail := evaluate[int](t, ctx, `Array.from(document.querySelectorAll("table.tests tbody tr")).filter(tr => tr.innerText.includes("FAIL")).length`)
	if rows == 0 || rows != failing || rows != sayFail || rows >= all {
		t.Errorf("filtered to failures: %d rows, %d marked failing, %d saying FAIL, of %d; want only the failures, each in words", rows, failing, sayFail, all)
	}
	shot(t, ctx, pics, "03-failures.png")

	// Open a failing test that awaits the office, by its link.
	link := `Array.from(document.querySelectorAll("table.tests tbody tr")).find(tr => tr.innerText.includes("awaiting review")).querySelector("a")`
	href := evaluate[string](t, ctx, link+`.getAttribute("href")`)
	if _, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.JSPath(link))); err != nil {
		t.Fatalf("open the failing test %s: %v", href, err)
	}
	testID := strings.TrimPrefix(href, "/test/")
	if h1 := evaluate[string](t, ctx, `document.querySelector("h1").innerText`); !strings.Contains(h1, "FAIL") || !strings.Contains(h1, words.ShortID(testID)) {
		t.Errorf("the test page's heading is %q, want its short id %s and FAIL", h1, words.ShortID(testID))
	}
	for _, want := range []string{"Raw readings", "The arithmetic, step by step", "Limits applied", "History", "does not conform"} {
		if !strings.Contains(evaluate[string](t, ctx, `document.body.innerText`), want) {
			t.Errorf("the test page does not show %q", want)
		}
	}
	shot(t, ctx, pics, "04-failing-test.png")

	// Return it with a comment.
	comment := "re-roll 14+10 and retest before the next lift is placed"
	if err := chromedp.Do(ctx, chromedp.SendKeys(chromedp.ID("comment"), comment)); err != nil {
		t.Fatal(err)
	}
	resp, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.CSS(`button[value="return"]`)))
	if err != nil {
		t.Fatal(err)
	}
	if resp.Status != http.StatusOK {
		t.Errorf("returning the test ended on status %d, want the test's page (200)", resp.Status)
	}
	body := evaluate[string](t, ctx, `document.body.innerText`)
	for _, want := range []string{"Returned to its inspector", "Now: returned", comment, "1 entry waits"} {
		if !strings.Contains(body, want) {
			t.Errorf("after returning, the page does not say %q", want)
		}
	}
	shot(t, ctx, pics, "05-returned.png")

	// A second opener of the same file, while the page still holds it,
	// sees the review, and it waits in the outbox.
	s2, err := client.Open(context.Background(), store, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	project, err := resolveProject(context.Background(), s2, "")
	if err != nil {
		t.Fatal(err)
	}
	got, err := s2.Test(project, testID)
	if err != nil {
		t.Fatal(err)
	}
	last := got.Reviews[len(got.Reviews)-1]
	if got.ReviewStatus != client.Returned || last.Decision != client.Return || last.Comment != comment || last.Author != s2.User() {
		t.Errorf("the store holds %s, last review %+v; want returned with the comment by the office's user %s", got.ReviewStatus, last, s2.User())
	}
	ob, err := s2.Outbox(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if ob.Pending != 1 {
		t.Errorf("outbox holds %d entries, want the one review", ob.Pending)
	}

	// Every other page, for a person to look at.
	for i, p := range []string{"locations", "charts", "audit", "frequency", "lots", "reconciliation"} {
		open(t, ctx, base+p)
		shot(t, ctx, pics, fmt.Sprintf("%02d-%s.png", i+6, p))
	}

	// The day for print, on A4 and on Letter: nothing wider than the paper
	// between its margins, and the PDF the browser prints.
	open(t, ctx, base+"print?date="+demoDate)
	shot(t, ctx, pics, "12-print.png")
	for _, paper := range []struct {
		name   string
		size   chromedp.PaperSize
		cssPx  int64 // the width between the page's side margins (10 mm each), CSS px
		height int64
	}{{"a4", chromedp.PaperA4, 718, 1032}, {"letter", chromedp.PaperLetter, 740, 965}} {
		err := chromedp.Do(ctx, func(ctx context.Context, tg *chromedp.Target) (chromedp.Void, error) {
			_, err := cdp.Call(ctx, tg, emulation.SetEmulatedMedia, emulation.SetEmulatedMediaParams{Media: "print"})
			return chromedp.Void{}, err
		}, chromedp.EmulateViewport(paper.cssPx, paper.height))
		if err != nil {
			t.Fatal(err)
		}
		wide := evaluate[int](t, ctx, `document.documentElement.scrollWidth`)
		if wide > int(paper.cssPx) {
			over := evaluate[[]string](t, ctx, fmt.Sprintf(`Array.from(document.querySelectorAll("body *")).filter(e => e.getBoundingClientRect().right > %d).slice(0, 8).map(e => e.tagName + "." + e.className + " " + Math.round(e.getBoundingClientRect().right))`, paper.cssPx))
			t.Errorf("printed on %s, the day is %d px wide, wider than the %d px between the margins: %q", paper.name, wide, paper.cssPx, over)
		}
		shot(t, ctx, pics, "13-print-"+paper.name+".png")
		pdf, err := chromedp.Run(ctx, chromedp.PrintToPDF(chromedp.PDFPaper(paper.size), chromedp.PDFMargin(0)))
		if err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(pics, "13-print-"+paper.name+".pdf")
		if err := os.WriteFile(p, pdf, 0o644); err != nil {
			t.Fatal(err)
		}
		t.Logf("printed: %s", p)
	}
}

// TestWebRefusesForgedPostInBrowser: a page of another origin that posts
// the review form to tamp web, even with the page's own token in it, is
// refused with 403 by the browser's own Origin and Sec-Fetch-Site, and
// nothing is recorded.
func TestWebRefusesForgedPostInBrowser(t *testing.T) {
	ctx := browser(t)
	dir := t.TempDir()
	runDemo(t, "--out", dir)
	store := filepath.Join(dir, "office.db")
	base := startWeb(t, store)

	// Read a failing test's address and the page's token as an attacker
	// who somehow learned it would.
	open(t, ctx, base+"day?verdict=fail&date="+demoDate)
	href := evaluate[string](t, ctx, `document.querySelector("table.tests tbody tr a").getAttribute("href")`)
	open(t, ctx, base+strings.TrimPrefix(href, "/"))
	token := evaluate[string](t, ctx, `document.querySelector('input[name="token"]').value`)

	evil := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		fmt.Fprintf(w, `<!doctype html><form method="post" action="%s"><input name="token" value="%s"><input name="decision" value="approve">`+
			`<button id="go">win a prize</button></form>`, html.EscapeString(base+strings.TrimPrefix(href, "/")+"/review"), html.EscapeString(token))
	}))
	defer evil.Close()
	// Another origin of the same machine: localhost and another port.
	eu, _ := url.Parse(evil.URL)
	open(t, ctx, "http://localhost:"+eu.Port()+"/")
	resp, err := chromedp.RunResponse(ctx, chromedp.Click(chromedp.ID("go")))
	if err != nil {
		t.Fatal(err)
	}
	if resp.Status != http.StatusForbidden {
		t.Errorf("a cross-site POST got status %d, want 403", resp.Status)
	}
	s2, err := client.Open(context.Background(), store, client.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if ob, err := s2.Outbox(context.Background()); err != nil || ob.Pending != 0 {
		t.Errorf("after the forged POST the outbox holds %d entries (%v), want none", ob.Pending, err)
	}
}

// TestWebListenRules: tamp web refuses an address other than loopback
// without TLS, naming the flag and the rule, and a store that does not
// exist, without making one.
func TestWebListenRules(t *testing.T) {
	dir := t.TempDir()
	missing := filepath.Join(dir, "none.db")
	_, _, err := run(t, "web", "--store", missing)
	if err == nil || !strings.Contains(err.Error(), "--store") {
		t.Errorf("tamp web on a missing store: %v, want an error naming --store", err)
	}
	if _, statErr := os.Stat(missing); !errors.Is(statErr, os.ErrNotExist) {
		t.Errorf("tamp web made a store at %s: %v", missing, statErr)
	}
	runDemo(t, "--out", dir)
	store := filepath.Join(dir, "office.db")
	for _, addr := range []string{"0.0.0.0:0", ":0", "192.0.2.10:8415"} {
		_, _, err := run(t, "web", "--store", store, "--listen", addr)
		if err == nil || !strings.Contains(err.Error(), "--listen") || !strings.Contains(err.Error(), "--tls-cert") ||
			!strings.Contains(err.Error(), "only over TLS") {
			t.Errorf("tamp web --listen %s: %v, want a refusal naming --listen, the rule and --tls-cert", addr, err)
		}
	}
	_, _, err = run(t, "web", "--store", store, "--tls-cert", filepath.Join(dir, "c.pem"))
	if err == nil || !strings.Contains(err.Error(), "--tls-key") {
		t.Errorf("tamp web with --tls-cert alone: %v, want an error naming --tls-key", err)
	}
	_, _, err = run(t, "web", "--store", store, "--client-ca", filepath.Join(dir, "ca.pem"))
	if err == nil || !strings.Contains(err.Error(), "--client-ca") || !strings.Contains(err.Error(), "--tls-cert") {
		t.Errorf("tamp web with --client-ca and no TLS: %v, want an error naming --client-ca and --tls-cert", err)
	}
}
