package status

import (
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"mime"
	"net/http"
	"net/url"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"
)

const (
	maxActionBody = 4 << 10
	actTimeout    = 10 * time.Second
	// maxShelve bounds a shelving. ISA-18.2 asks that shelving be
	// time-limited; the one-day limit is glowgate's own choice.
	maxShelve = 24 * time.Hour
	maxByLen  = 64 // runes of an operator's name
)

// authorize checks that r may change state: actions are on, it comes from
// this origin, and it carries the operator token. It answers r itself and
// returns false when not.
//
//	403  actions off (no token or no Act), another site, or a wrong token
//	401  no token (WWW-Authenticate: Bearer)
func (s *Server) authorize(w http.ResponseWriter, r *http.Request) bool {
	if !s.actionsOn() {
		http.Error(w, "read-only: this gateway takes no operator actions", http.StatusForbidden)
		return false
	}
	if !sameOrigin(r) {
		http.Error(w, "cross-site request refused", http.StatusForbidden)
		return false
	}
	tok, ok := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer ")
	if !ok || tok == "" {
		w.Header().Set("WWW-Authenticate", `Bearer realm="glowgate"`)
		http.Error(w, "operator token required", http.StatusUnauthorized)
		return false
	}
	// Hashing first makes the comparison constant-time in the length too.
	sum := sha256.Sum256([]byte(tok))
	if subtle.ConstantTimeCompare(sum[:], s.tokenSum[:]) != 1 {
		s.log.Warn("status: wrong operator token", "remote", r.RemoteAddr, "path", r.URL.Path)
		http.Error(w, "wrong operator token", http.StatusForbidden)
		return false
	}
	return true
}

// sameOrigin reports whether r may come from this server's own page: a
// browser marks requests from another site with Sec-Fetch-Site and
// Origin; requests without them (command-line clients) pass.
func sameOrigin(r *http.Request) bool {
	switch r.Header.Get("Sec-Fetch-Site") {
	case "", "same-origin", "none":
	default:
		return false
	}
	o := r.Header.Get("Origin")
	if o == "" {
		return true
	}
	u, err := url.Parse(o)
	return err == nil && u.Host == r.Host
}

// serveSession answers POST /api/session: 204 when the token is right
// (the page's sign-in check); it changes nothing.
func (s *Server) serveSession(w http.ResponseWriter, r *http.Request) {
	if !s.authorize(w, r) {
		return
	}
	w.Header().Set("Cache-Control", "no-store")
	w.WriteHeader(http.StatusNoContent)
}

// actionRequest is the JSON body of POST /api/action.
type actionRequest struct {
	Kind    string `json:"kind"`    // acknowledge, shelve or unshelve
	Head    string `json:"head"`    // the alarm's head
	Alarm   string `json:"alarm"`   // the alarm's name
	By      string `json:"by"`      // the operator's name; empty: "operator"
	Minutes int    `json:"minutes"` // shelve: for how long, 1..1440
}

// serveAction answers POST /api/action (Content-Type application/json,
// body an actionRequest, the token in Authorization: Bearer): 200
// {"ok":true} when Act accepted it; 400 for a malformed request, 404 for
// an alarm not in the list, 409 with Act's error, 415 for another content
// type, and authorize's answers.
func (s *Server) serveAction(w http.ResponseWriter, r *http.Request) {
	if !s.authorize(w, r) {
		return
	}
	if mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type")); err != nil || mt != "application/json" {
		http.Error(w, "action: want Content-Type application/json", http.StatusUnsupportedMediaType)
		return
	}
	var req actionRequest
	dec := json.NewDecoder(http.MaxBytesReader(w, r.Body, maxActionBody))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&req); err != nil {
		http.Error(w, "action: "+err.Error(), http.StatusBadRequest)
		return
	}
	a, err := s.validAction(req)
	if err != nil {
		code := http.StatusBadRequest
		if errors.Is(err, errNoAlarm) {
			code = http.StatusNotFound
		}
		http.Error(w, "action: "+err.Error(), code)
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), actTimeout)
	defer cancel()
	log := s.log.With("kind", a.Kind, "head", a.Head, "alarm", a.Alarm, "by", a.By)
	if err := s.o.Act(ctx, a); err != nil {
		log.Warn("operator action refused", "error", err)
		http.Error(w, "action: "+err.Error(), http.StatusConflict)
		return
	}
	if a.Kind == ActionShelve {
		log.Info("operator action", "until", a.Until)
	} else {
		log.Info("operator action")
	}
	writeJSON(w, http.StatusOK, []byte(`{"ok":true}`))
}

var errNoAlarm = errors.New("no such alarm")

// validAction checks req against the alarm list and returns the Action.
func (s *Server) validAction(req actionRequest) (Action, error) {
	a := Action{Kind: req.Kind, Head: req.Head, Alarm: req.Alarm, By: strings.TrimSpace(req.By)}
	switch a.Kind {
	case ActionAcknowledge, ActionShelve, ActionUnshelve:
	default:
		return a, fmt.Errorf("kind %q: want %s, %s or %s", a.Kind, ActionAcknowledge, ActionShelve, ActionUnshelve)
	}
	if a.Head == "" || a.Alarm == "" {
		return a, errors.New("head and alarm are required")
	}
	if a.By == "" {
		a.By = "operator"
	}
	if utf8.RuneCountInString(a.By) > maxByLen || strings.IndexFunc(a.By, func(r rune) bool { return !unicode.IsPrint(r) }) >= 0 {
		return a, fmt.Errorf("by: want at most %d printable characters", maxByLen)
	}
	now := s.now()
	switch {
	case a.Kind == ActionShelve:
		if req.Minutes < 1 || time.Duration(req.Minutes)*time.Minute > maxShelve {
			return a, fmt.Errorf("minutes %d: want 1 to %d", req.Minutes, int(maxShelve/time.Minute))
		}
		a.Until = now.Add(time.Duration(req.Minutes) * time.Minute)
	case req.Minutes != 0:
		return a, fmt.Errorf("minutes: only for %s", ActionShelve)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	for _, al := range s.alarms {
		if al.Head == a.Head && al.Name == a.Alarm {
			return a, nil
		}
	}
	return a, fmt.Errorf("%w: %q on head %q", errNoAlarm, a.Alarm, a.Head)
}
