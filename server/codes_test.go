package server_test

import (
	"context"
	"encoding/base64"
	"io"
	"math/rand/v2"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"tamp/client"
	"tamp/server"
)

// codeForm is the printed form of an enrolment code: 25 symbols of
// Crockford's base32 (no I, L, O or U) in five dashed groups of five.
var codeForm = regexp.MustCompile(`^[0-9A-HJKMNP-TV-Z]{5}(-[0-9A-HJKMNP-TV-Z]{5}){4}$`)

// seededCluster starts a cluster whose server draws its randomness from a
// seeded generator, so the codes it issues are the same on every run.
func seededCluster(t *testing.T, opts func(*server.Options)) *cluster {
	t.Helper()
	c := &cluster{tb: t, dir: t.TempDir(), opts: func(o *server.Options) {
		o.Rand = rand.NewChaCha8([32]byte{'t', 'a', 'm', 'p'})
		if opts != nil {
			opts(o)
		}
	}}
	c.start("")
	return c
}

// issue issues a code for a new user of the cluster's server.
func issue(t *testing.T, c *cluster) string {
	t.Helper()
	return enrolmentCode(t, c, "Wren Halloway", false)
}

// enrol enrols a new device store with code on c.
func enrol(t *testing.T, c *cluster, code string) (*client.Store, error) {
	t.Helper()
	s := openStore(t, filepath.Join(t.TempDir(), "tablet.db"))
	return s, s.Enroll(context.Background(), c.conn(""), code, "tablet 2")
}

// constantReader is randomness that is always the one byte.
type constantReader byte

func (r constantReader) Read(p []byte) (int, error) {
	for i := range p {
		p[i] = byte(r)
	}
	return len(p), nil
}

// Enrolment codes are 25 symbols of Crockford's base32 in five dashed
// groups, drawn from the server's randomness: every symbol of the alphabet
// turns up, and none of I, L, O, U ever does.
func TestEnrolmentCodesAreCrockfordGroups(t *testing.T) {
	c := seededCluster(t, nil)
	seen := map[rune]bool{}
	for range 40 {
		code := issue(t, c)
		if !codeForm.MatchString(code) {
			t.Fatalf("code %q: want 25 symbols of 0-9 A-Z without I L O U, as XXXXX-XXXXX-XXXXX-XXXXX-XXXXX", code)
		}
		for _, r := range strings.ReplaceAll(code, "-", "") {
			seen[r] = true
		}
	}
	if len(seen) != 32 {
		t.Errorf("40 codes used %d of the 32 symbols, want all", len(seen))
	}

	// The code is the server's injected randomness, five bits a symbol.
	for _, tc := range []struct {
		rand constantReader
		want string
	}{
		{0xff, "ZZZZZ-ZZZZZ-ZZZZZ-ZZZZZ-ZZZZZ"},
		{0x00, "00000-00000-00000-00000-00000"},
		{0x84, "GJ289-144GJ-28914-4GJ28-9144G"}, // 10000 10010 00010 01000 01001 00001 00100 00100: G J 2 8 9 1 4 4, every 40 bits
	} {
		c := &cluster{tb: t, dir: t.TempDir(), opts: func(o *server.Options) { o.Rand = tc.rand }}
		c.start("")
		if code := issue(t, c); code != tc.want {
			t.Errorf("randomness of bytes %#x: code %q, want %q", byte(tc.rand), code, tc.want)
		}
	}
}

// A code enrols however it is typed: lower case, without dashes, with
// spaces or a tablet's typographic dashes between groups, and with I or L
// for 1 and O for 0. Each form is the one code: enrolling with it uses the
// code up.
func TestEnrolmentCodeTypedByHand(t *testing.T) {
	c := seededCluster(t, nil)
	lookalikes := strings.NewReplacer("1", "l", "0", "o")
	for _, tc := range []struct {
		name  string
		typed func(code string) string
	}{
		{"lower case without dashes", func(code string) string { return strings.ToLower(strings.ReplaceAll(code, "-", "")) }},
		{"spaces between groups", func(code string) string { return " " + strings.ReplaceAll(code, "-", " ") + "\n" }},
		{"typographic dashes", func(code string) string { return strings.ReplaceAll(code, "-", " \u2013 ") }},
		{"I and L for 1, O for 0", func(code string) string { return strings.ReplaceAll(lookalikes.Replace(code), "l", "I") }},
		{"l and o in lower case", func(code string) string { return strings.ToLower(lookalikes.Replace(code)) }},
	} {
		t.Run(tc.name, func(t *testing.T) {
			code := issue(t, c)
			for !strings.Contains(code, "1") || !strings.Contains(code, "0") { // so the look-alikes are typed
				code = issue(t, c)
			}
			typed := tc.typed(code)
			if _, err := enrol(t, c, typed); err != nil {
				t.Fatalf("enrol with %q, issued as %q: %v", typed, code, err)
			}
			_, err := enrol(t, c, code)
			wantServerError(t, "enrol again with the code as issued", err, "CODE_INVALID", "code", "", client.ErrCodeInvalid)
		})
	}
	// A code is no prefix: one symbol short or one too many does not enrol.
	code := issue(t, c)
	for _, typed := range []string{code[:len(code)-1], code + "0"} {
		_, err := enrol(t, c, typed)
		wantServerError(t, "enrol with "+typed, err, "CODE_INVALID", "code", "", client.ErrCodeInvalid)
	}
	if _, err := enrol(t, c, code); err != nil {
		t.Errorf("enrol with %q after the near misses: %v", code, err)
	}
}

// Codes issued before the current form (43 characters of base64url, held
// as the hash of the code as issued) still enrol, exactly as issued; one
// whose dashes happen to leave 25 symbols of the new alphabet is not
// rewritten.
func TestOldFormEnrolmentCodesStillEnrol(t *testing.T) {
	c := startCluster(t, t.TempDir())
	ctx := context.Background()
	user, err := c.srv.AddUser(ctx, "Wren Halloway", false)
	if err != nil {
		t.Fatal(err)
	}
	raw := make([]byte, 32)
	if _, err := io.ReadFull(rand.NewChaCha8([32]byte{'o', 'l', 'd'}), raw); err != nil {
		t.Fatal(err)
	}
	for _, code := range []string{
		base64.RawURLEncoding.EncodeToString(raw), // as Server.secret made them
		"x-Q_9a-zK0-oL1-iI8-Ww3-M_-n2-b7-Cc-4-d5-Ee6",
		"A-B-C-D-E-F-G-H-J-K-M-N-P-Q-R-S-T-V-WXYZ012", // 25 symbols and 18 dashes: 43 characters of base64url
	} {
		if len(code) != 43 {
			t.Fatalf("old-form code %q is %d characters, want 43", code, len(code))
		}
		if err := c.store.AddEnrollmentCode(ctx, hashOf(code), user, time.Now().Add(time.Hour)); err != nil {
			t.Fatal(err)
		}
		if _, err := enrol(t, c, code); err != nil {
			t.Errorf("enrol with the old-form code %q: %v", code, err)
		}
	}
}

// Failed enrolments from one address are limited: EnrollAttemptBurst at
// once, then EnrollAttemptRate a second. Enrolments that succeed take
// nothing from the limit; a refused attempt neither tests nor uses up its
// code; and resumes count alike.
func TestFailedEnrolmentAttemptsAreLimited(t *testing.T) {
	clk := &clock{t: time.Now()}
	c := &cluster{tb: t, dir: t.TempDir(), now: clk.now, opts: func(o *server.Options) {
		o.EnrollAttemptBurst = 3
		o.EnrollAttemptRate = 0.1 // one every ten seconds
	}}
	c.start("")
	ctx := context.Background()

	var enrolled *client.Store
	for i := range 5 { // more than the burst: successes do not count
		s, err := enrol(t, c, issue(t, c))
		if err != nil {
			t.Fatalf("enrolment %d: %v", i+1, err)
		}
		enrolled = s
	}
	for i := range 3 {
		_, err := enrol(t, c, "ZZZZZ-ZZZZZ-ZZZZZ-ZZZZZ-ZZZZ"+string(rune('0'+i)))
		wantServerError(t, "a wrong code", err, "CODE_INVALID", "code", "", client.ErrCodeInvalid)
	}
	good := issue(t, c)
	_, err := enrol(t, c, good)
	wantServerError(t, "a good code after three wrong ones", err, "RATE_LIMITED", "", "enrolment_attempts", client.ErrRateLimited)
	err = enrolled.Resume(ctx, c.conn(""))
	wantServerError(t, "a resume after three wrong codes", err, "RATE_LIMITED", "", "enrolment_attempts", client.ErrRateLimited)

	clk.advance(10 * time.Second)
	if _, err := enrol(t, c, good); err != nil {
		t.Fatalf("the good code once the limit allows another attempt: %v", err)
	}
	_, err = enrol(t, c, good)
	wantServerError(t, "the good code, used", err, "CODE_INVALID", "code", "", client.ErrCodeInvalid)
	_, err = enrol(t, c, issue(t, c))
	wantServerError(t, "another good code after the failure", err, "RATE_LIMITED", "", "enrolment_attempts", client.ErrRateLimited)
}

// A crew enrolling more tablets at once than the burst from one office
// address is not refused: a call finding the bucket empty only because
// others are in flight waits for them to settle.
func TestCrewEnrolsAtOnceFromOneAddress(t *testing.T) {
	c := &cluster{tb: t, dir: t.TempDir(), opts: func(o *server.Options) {
		o.EnrollAttemptBurst = 2
		o.EnrollAttemptRate = 0.01
	}}
	c.start("")
	var codes []string
	for range 8 {
		codes = append(codes, issue(t, c))
	}
	errs := make(chan error, len(codes))
	var wg sync.WaitGroup
	for _, code := range codes {
		wg.Add(1)
		go func() {
			defer wg.Done()
			_, err := enrol(t, c, code)
			errs <- err
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		if err != nil {
			t.Errorf("a crew member's enrolment: %v", err)
		}
	}
}

// A resume whose certificate another server signed is a failed attempt.
func TestFailedResumesCountTowardTheEnrolmentLimit(t *testing.T) {
	c := &cluster{tb: t, dir: t.TempDir(), opts: func(o *server.Options) { o.EnrollAttemptBurst = 2 }}
	c.start("")
	other := startCluster(t, t.TempDir())
	elsewhere, err := enrol(t, other, issue(t, other))
	if err != nil {
		t.Fatal(err)
	}
	for range 2 {
		err := elsewhere.Resume(context.Background(), c.conn(""))
		wantServerError(t, "resume with another server's certificate", err, "CERTIFICATE_INVALID", "certificate", "", client.ErrUnauthenticated)
	}
	_, err = enrol(t, c, issue(t, c))
	wantServerError(t, "a good code after two failed resumes", err, "RATE_LIMITED", "", "enrolment_attempts", client.ErrRateLimited)
}
