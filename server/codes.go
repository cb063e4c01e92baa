package server

import (
	"context"
	"fmt"
	"io"
	"math"
	"net"
	"strings"
	"sync"
	"time"
	"unicode"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/peer"
	"google.golang.org/grpc/status"

	pb "tamp/internal/gen/tamp/v1"
)

// Enrolment codes are typed by hand on a tablet, so they are short and
// forgiving: 125 random bits written as 25 characters of Crockford's base32
// alphabet (digits and capital letters without I, L, O and U), in five
// groups of five joined by dashes. A code is accepted in either case, with
// or without the dashes or spaces between groups, and with I or L typed
// for 1 and O for 0; it is brought back to its printed form (capitals in
// dashed groups) before it is hashed, so the store keeps the SHA-256 of
// the code as issued. A code of the earlier form (43 characters of
// base64url, 256 bits) is hashed as given, so codes issued before the
// change keep working until they lapse.
// Tokens are never typed and stay 256 bits of base64url (Server.secret).

// codeAlphabet is Crockford's base32 alphabet: symbol i stands for the
// five bits of i.
const codeAlphabet = "0123456789ABCDEFGHJKMNPQRSTVWXYZ"

// The shape of a code: codeGroups groups of codeGroupLen symbols.
const (
	codeGroups   = 5
	codeGroupLen = 5
	codeLen      = codeGroups * codeGroupLen // 25 symbols, 125 bits
)

// newCode returns a new enrolment code from the server's randomness, in
// its printed form.
func (s *Server) newCode() string {
	var b [(codeLen*5 + 7) / 8]byte // 128 bits, of which the first 125 are used
	if _, err := io.ReadFull(s.opts.Rand, b[:]); err != nil {
		panic(fmt.Sprintf("server: random: %v", err))
	}
	var symbols [codeLen]byte
	for i := range symbols {
		v := 0
		for j := range 5 {
			k := 5*i + j
			v = v<<1 | int(b[k/8]>>(7-k%8)&1)
		}
		symbols[i] = codeAlphabet[v]
	}
	return printedCode(symbols[:])
}

// printedCode returns 25 symbols in their printed form,
// XXXXX-XXXXX-XXXXX-XXXXX-XXXXX.
func printedCode(symbols []byte) string {
	var out strings.Builder
	for i, c := range symbols {
		if i > 0 && i%codeGroupLen == 0 {
			out.WriteByte('-')
		}
		out.WriteByte(c)
	}
	return out.String()
}

// canonicalCode returns the text of code whose hash the store keeps. A code
// of the current form, however typed, becomes its printed form; anything
// else (a code of the earlier 43-character form, or no code at all) is
// returned as given, and so matches only what was issued exactly.
func canonicalCode(code string) string {
	if oldFormCode(code) {
		return code
	}
	var b []byte
	for _, r := range code {
		switch {
		case unicode.IsSpace(r) || unicode.Is(unicode.Pd, r): // dashes, a tablet's typographic ones too
			continue
		case r > unicode.MaxASCII:
			return code
		}
		switch r = unicode.ToUpper(r); r {
		case 'I', 'L':
			r = '1'
		case 'O':
			r = '0'
		}
		if !strings.ContainsRune(codeAlphabet, r) {
			return code
		}
		if b = append(b, byte(r)); len(b) > codeLen {
			return code
		}
	}
	if len(b) != codeLen {
		return code
	}
	return printedCode(b)
}

// oldFormCode reports whether code has the form of the codes issued before
// the current form: 43 characters of base64url. Such a code is never
// rewritten, even when its dashes happen to leave 25 symbols of the
// current alphabet.
func oldFormCode(code string) bool {
	if len(code) != 43 {
		return false
	}
	for _, r := range code {
		if !(r >= 'A' && r <= 'Z' || r >= 'a' && r <= 'z' || r >= '0' && r <= '9' || r == '-' || r == '_') {
			return false
		}
	}
	return true
}

// Failed enrolment attempts.
//
// EnrollDevice and ResumeDevice take a secret from a caller the server does
// not know yet, so they are where a secret would be guessed. A call of
// either that is refused as Unauthenticated (an unknown, used or expired
// code; a certificate or proof that does not verify) counts against the
// caller's network address: an IPv4 address, or an IPv6 address's /64
// prefix, which is what one subscriber is usually given. Each address has
// a bucket of EnrollAttemptBurst attempts that refills at EnrollAttemptRate
// a second; an attempt is taken from it as the call starts and given back
// when the call does not fail so, so a crew enrolling many tablets from one
// office address is never held up by its own successes. When the bucket is
// empty only because calls from the address are still in flight (a crew
// enrolling at once), a call waits for one of them to end rather than being
// refused for failures no one made. A call from an address whose bucket is
// empty of failures is refused with ResourceExhausted, reason RATE_LIMITED,
// rule enrolment_attempts, before the code is looked up: its code, right or
// not, is neither used up nor tested.
//
// At most maxAttemptAddresses addresses are tracked; a full bucket is
// forgotten when room is needed, and while every tracked address has
// failures to its name, further addresses share one overflow bucket. So
// however many addresses a guesser has, no more than
// (maxAttemptAddresses+1) buckets' worth of failures are allowed.
//
// Behind a proxy that does not pass the caller's address on, every caller
// shares the proxy's address and so one bucket.

// maxAttemptAddresses bounds the addresses whose failed attempts are
// tracked at once.
const maxAttemptAddresses = 4096

// overflowAddress is the bucket of the addresses beyond maxAttemptAddresses.
const overflowAddress = "*"

// attemptLimited lists the calls whose failures are limited.
var attemptLimited = map[string]bool{
	pb.AdminService_EnrollDevice_FullMethodName: true,
	pb.AdminService_ResumeDevice_FullMethodName: true,
}

// attempts is a token bucket of failed attempts per network address. It is
// safe for concurrent use.
type attempts struct {
	mu       sync.Mutex
	rate     float64 // attempts a second
	burst    float64
	max      int // addresses tracked at once
	buckets  map[string]*bucket
	inflight map[string]int // attempts taken and not yet settled, by bucket
}

// maxAttemptWait is how long a call waits for the calls in flight from its
// address to settle before it is refused.
const maxAttemptWait = 30 * time.Second

func newAttempts(rate float64, burst int) *attempts {
	return &attempts{rate: rate, burst: float64(burst), max: maxAttemptAddresses, buckets: map[string]*bucket{}, inflight: map[string]int{}}
}

// take takes an attempt from addr's bucket at now. It returns the bucket
// it took from (addr, or the overflow bucket), and when the bucket was
// empty, false, how long until it holds an attempt again, and whether
// attempts taken from it are still in flight (and may be given back).
func (a *attempts) take(addr string, now time.Time) (key string, ok bool, wait time.Duration, busy bool) {
	a.mu.Lock()
	defer a.mu.Unlock()
	key = addr
	b := a.buckets[key]
	if b == nil && len(a.buckets) >= a.max {
		a.prune(now)
		if len(a.buckets) >= a.max {
			key = overflowAddress
			b = a.buckets[key]
		}
	}
	if b == nil {
		b = &bucket{tokens: a.burst, at: now}
		a.buckets[key] = b
	}
	a.refill(b, now)
	if b.tokens < 1 {
		return key, false, time.Duration(math.Ceil((1-b.tokens)/a.rate)) * time.Second, a.inflight[key] > 0
	}
	b.tokens--
	a.inflight[key]++
	return key, true, 0, false
}

// settle ends an attempt taken from key: a call that did not fail gives it
// back.
func (a *attempts) settle(key string, failed bool) {
	a.mu.Lock()
	defer a.mu.Unlock()
	if a.inflight[key]--; a.inflight[key] <= 0 {
		delete(a.inflight, key)
	}
	if b := a.buckets[key]; b != nil && !failed {
		b.tokens = min(a.burst, b.tokens+1)
	}
}

func (a *attempts) refill(b *bucket, now time.Time) {
	if now.After(b.at) {
		b.tokens = min(a.burst, b.tokens+now.Sub(b.at).Seconds()*a.rate)
		b.at = now
	}
}

// prune forgets the buckets that are full at now: a new bucket would be
// the same.
func (a *attempts) prune(now time.Time) {
	for k, b := range a.buckets {
		if a.refill(b, now); b.tokens >= a.burst {
			delete(a.buckets, k)
		}
	}
}

// callerAddress returns the network address a call's failed attempts count
// against: the IP of a TCP peer (an IPv6 one's /64 prefix), else the peer's
// address as text.
func callerAddress(ctx context.Context) string {
	p, ok := peer.FromContext(ctx)
	if !ok || p.Addr == nil {
		return ""
	}
	tcp, ok := p.Addr.(*net.TCPAddr)
	if !ok {
		return p.Addr.String()
	}
	if ip4 := tcp.IP.To4(); ip4 != nil {
		return ip4.String()
	}
	return (&net.IPNet{IP: tcp.IP.Mask(net.CIDRMask(64, 128)), Mask: net.CIDRMask(64, 128)}).String()
}

// limitAttempts runs a unary call through h, within the limit on failed
// attempts when the call is one attemptLimited lists.
func (s *Server) limitAttempts(ctx context.Context, req any, info *grpc.UnaryServerInfo, h grpc.UnaryHandler) (any, error) {
	if !attemptLimited[info.FullMethod] {
		return h(ctx, req)
	}
	addr := callerAddress(ctx)
	key, ok, wait, busy := s.attempts.take(addr, s.opts.Now())
	for deadline := time.Now().Add(maxAttemptWait); !ok && busy && time.Now().Before(deadline); {
		select { // calls from this address are in flight: wait for one to settle
		case <-ctx.Done():
			return nil, status.FromContextError(ctx.Err()).Err()
		case <-time.After(20 * time.Millisecond):
		}
		key, ok, wait, busy = s.attempts.take(addr, s.opts.Now())
	}
	if !ok {
		return nil, statusError(codes.ResourceExhausted, reasonRateLimited, "", "enrolment_attempts",
			fmt.Sprintf("too many failed enrolment attempts from this address; try again in %s", wait))
	}
	resp, err := h(ctx, req)
	s.attempts.settle(key, status.Code(err) == codes.Unauthenticated)
	return resp, err
}
