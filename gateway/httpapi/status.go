package httpapi

import (
	"crypto/sha256"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"net/url"
	"strings"

	"etpulse/gateway/status"
)

// StatusReader is what the status pages and their JSON API read
// (*status.Reader).
type StatusReader interface {
	Overview() (status.Overview, error)
	Station(site, station string) (status.StationPage, error)
	Zone(site, zone string) (status.ZonePage, error)
	Alerts() (status.AlertsPage, error)
}

var _ StatusReader = (*status.Reader)(nil)

// Status paths. The pages are rendered from the same structs the JSON API
// returns.
const (
	StatusAPIPrefix = "/api/v1/"
	tokenCookie     = "etpulse_token"
)

// statusSetup is what SetStatus installs.
type statusSetup struct {
	reader StatusReader
	token  [32]byte // sha256 of the token; zero with no token
	hasTok bool
}

// SetStatus enables the status pages and their JSON API, read from r. A
// non-empty token is then required on them (a Bearer header, or ?token=
// once, which sets a cookie); /metrics, /healthz and /readyz stay open.
// It may be called while the server runs.
func (s *Server) SetStatus(r StatusReader, token string) {
	st := &statusSetup{reader: r}
	if token != "" {
		st.token, st.hasTok = sha256.Sum256([]byte(token)), true
	}
	s.status.Store(st)
}

// statusRoutes registers the pages and the API on mux.
func (s *Server) statusRoutes(mux *http.ServeMux) {
	page := func(fn func(w http.ResponseWriter, r *http.Request, rd StatusReader)) http.HandlerFunc {
		return func(w http.ResponseWriter, r *http.Request) {
			st := s.status.Load()
			if st == nil {
				http.Error(w, "status pages are not enabled on this listener", http.StatusServiceUnavailable)
				return
			}
			if !s.authorized(w, r, st) {
				return
			}
			fn(w, r, st.reader)
		}
	}
	mux.HandleFunc("GET /{$}", page(s.overviewPage))
	mux.HandleFunc("GET /stations/{site}/{station}", page(s.stationPage))
	mux.HandleFunc("GET /zones/{site}/{zone}", page(s.zonePage))
	mux.HandleFunc("GET /alerts", page(s.alertsPage))
	mux.HandleFunc("GET "+StatusAPIPrefix+"overview", page(func(w http.ResponseWriter, r *http.Request, rd StatusReader) {
		v, err := rd.Overview()
		s.writeJSON(w, v, err)
	}))
	mux.HandleFunc("GET "+StatusAPIPrefix+"stations/{site}/{station}", page(func(w http.ResponseWriter, r *http.Request, rd StatusReader) {
		v, err := rd.Station(r.PathValue("site"), r.PathValue("station"))
		s.writeJSON(w, v, err)
	}))
	mux.HandleFunc("GET "+StatusAPIPrefix+"zones/{site}/{zone}", page(func(w http.ResponseWriter, r *http.Request, rd StatusReader) {
		v, err := rd.Zone(r.PathValue("site"), r.PathValue("zone"))
		s.writeJSON(w, v, err)
	}))
	mux.HandleFunc("GET "+StatusAPIPrefix+"alerts", page(func(w http.ResponseWriter, r *http.Request, rd StatusReader) {
		v, err := rd.Alerts()
		s.writeJSON(w, v, err)
	}))
}

// authorized checks the access token when one is set. A valid ?token= sets
// an HttpOnly, SameSite=Strict cookie and redirects to the same address
// without it, so the token does not stay in the address bar or history.
func (s *Server) authorized(w http.ResponseWriter, r *http.Request, st *statusSetup) bool {
	if !st.hasTok {
		return true
	}
	ok := func(v string) bool {
		h := sha256.Sum256([]byte(v))
		return v != "" && subtle.ConstantTimeCompare(h[:], st.token[:]) == 1
	}
	if v, found := strings.CutPrefix(r.Header.Get("Authorization"), "Bearer "); found && ok(v) {
		return true
	}
	if q := r.URL.Query(); q.Has("token") {
		if ok(q.Get("token")) {
			http.SetCookie(w, &http.Cookie{Name: tokenCookie, Value: q.Get("token"), Path: "/", HttpOnly: true,
				SameSite: http.SameSiteStrictMode, Secure: r.TLS != nil || r.Header.Get("X-Forwarded-Proto") == "https"})
			q.Del("token")
			u := url.URL{Path: r.URL.Path, RawQuery: q.Encode()}
			http.Redirect(w, r, u.String(), http.StatusSeeOther)
			return false
		}
	} else if c, err := r.Cookie(tokenCookie); err == nil && ok(c.Value) {
		return true
	}
	w.Header().Set("WWW-Authenticate", `Bearer realm="etpulse"`)
	http.Error(w, "unauthorized: this gateway's status pages need its access token (http.token_file): "+
		"send 'Authorization: Bearer TOKEN', or open the page once with ?token=TOKEN", http.StatusUnauthorized)
	return false
}

// writeJSON answers v as JSON, or the error: 404 for an unknown station or
// zone, 500 otherwise.
func (s *Server) writeJSON(w http.ResponseWriter, v any, err error) {
	if err != nil {
		s.fail(w, err)
		return
	}
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(v); err != nil {
		s.log.Warn("status api: writing response", "err", err)
	}
}

func (s *Server) fail(w http.ResponseWriter, err error) {
	if errors.Is(err, status.ErrNotFound) {
		http.Error(w, fmt.Sprintf("not found: %v", err), http.StatusNotFound)
		return
	}
	s.log.Error("status page", "err", err)
	http.Error(w, "status unavailable: "+err.Error(), http.StatusInternalServerError)
}
