// Package status is the operator's window on a glowgate gateway: an HTTP
// server with a status page, a JSON API with a live event stream,
// Prometheus metrics and a health check.
//
// The daemon feeds a Server from its own goroutines; every feeding method
// is safe for concurrent use and returns at once, whatever the browsers
// connected to the page are doing:
//
//   - Reading, for every reading: the Server keeps the latest reading of
//     each head, an hour of history per head (at most one point per
//     second), and hands the reading to the live event stream;
//   - SetHeads, on start and on every reload: the heads as configured;
//   - SetAlarms, whenever the alarm list changes;
//   - SetHealth, with the publisher's figures (broker, outbox);
//   - SetLineStats, once: a function that reads the field-bus lines'
//     counters, called on every scrape of /metrics and for the page's
//     line health.
//
// Endpoints:
//
//	GET  /                 the status page (HTML, CSS and JavaScript embedded; no external assets)
//	GET  /static/...       the page's script and style sheet
//	GET  /api/state        gateway, heads, latest readings, alarms and health, as JSON
//	GET  /api/history      trends: ?head=NAME (one head, all series) or none (temperatures of all heads); &minutes=1..60; &step=1..60 s
//	GET  /api/events       server-sent events: readings, heads, alarms, health
//	POST /api/session      checks an operator token (204 when right)
//	POST /api/action       acknowledge, shelve or unshelve an alarm (operator token required)
//	GET  /metrics          Prometheus text exposition of the injected registry
//	GET  /healthz          200 "ok" or 503 "degraded: reasons"
//
// The live stream never holds up the daemon: readings go into a ring of
// recent events that each connected browser reads at its own pace, at most
// four batches a second and only the latest reading of each head in a
// batch. A browser that falls further behind than the ring holds loses the
// readings in between and is told to reload its state.
//
// Security: state changes only by POST with the operator token in an
// Authorization: Bearer header, compared in constant time; without a token
// in Options the page is read-only. The server sends no CORS headers, so
// no other origin can read its answers or send it the token, and it
// refuses actions whose Origin or Sec-Fetch-Site says they come from
// another site. Every answer carries Content-Security-Policy
// default-src 'self' (no inline script, no other hosts); the page writes
// configuration-provided text with textContent, never as HTML.
package status
