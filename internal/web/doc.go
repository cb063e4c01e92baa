// Package web serves the office's review page, tamp web: the crew's tests
// of a day and each test's readings, arithmetic, limits, history and retest
// chain, the office's approve and return, the QA reports, the charts, the
// test locations and a printable day, as server-rendered HTML over the
// device's own store, with no network beyond the browser's connection to
// this process and no JavaScript.
//
// The rules that must hold:
//
//   - The store is opened for each request and closed after it, so the page
//     always shows what the file holds, and a review it records is made on
//     the store's current state: another process (tamp sync, tamp review)
//     may use the same file at the same time. SQLite's WAL and the store's
//     busy timeout serialise their writes.
//   - A review is an entry signed on this device for the store's user, kept
//     in the outbox until the next tamp sync, exactly as tamp review makes
//     it; the page adds no login and no server of its own.
//   - The page listens on a loopback address, or on another address only
//     over TLS (Listen). Over plain HTTP a request must name a loopback host,
//     so a web site cannot reach the page through a name it controls.
//   - Every write is a POST carrying the process's secret token, from the
//     page's own origin (Origin and Sec-Fetch-Site, checked by
//     net/http's CrossOriginProtection): a forged cross-site POST is refused
//     with 403 Forbidden and nothing is recorded.
//   - Every value anyone typed is escaped by html/template; the page allows
//     no script (Content-Security-Policy), and verdicts are shown as a word
//     and a shape as well as a colour.
//   - Values are SI inside and shown in the project's units at the
//     resolution the test methods report; every page carries the cautions:
//     nuclear gauges are licensed radioactive sources, results need review
//     by qualified personnel, and the project's specifications govern.
package web
