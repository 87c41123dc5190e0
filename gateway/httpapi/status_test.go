package httpapi

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/status"
)

// fixedStatus is a read model returning fixed views; the status package's
// own tests read a real state file. Here only the HTTP side is under test.
type fixedStatus struct {
	ov     status.Overview
	st     status.StationPage
	zn     status.ZonePage
	al     status.AlertsPage
	failed error
}

func (f *fixedStatus) Overview() (status.Overview, error) { return f.ov, f.failed }
func (f *fixedStatus) Station(site, station string) (status.StationPage, error) {
	if site != f.st.Summary.Site || station != f.st.Summary.Station {
		return status.StationPage{}, fmt.Errorf("station %q of site %q: %w", station, site, status.ErrNotFound)
	}
	return f.st, f.failed
}
func (f *fixedStatus) Zone(site, zone string) (status.ZonePage, error) {
	if site != f.zn.Summary.Site || zone != f.zn.Summary.Zone {
		return status.ZonePage{}, fmt.Errorf("zone %q of site %q: %w", zone, site, status.ErrNotFound)
	}
	return f.zn, f.failed
}
func (f *fixedStatus) Alerts() (status.AlertsPage, error) { return f.al, f.failed }

func ptr[T any](v T) *T { return &v }

// evil is an id as hostile as a configuration could carry; pages must
// print it escaped.
const evil = `<script>alert("x")</script>`

// sample builds views of a station with 72 hours (every third without ET,
// nights every hour after 18:00), a zone with steps and runs, and alerts.
func sample(site, station, zone string) *fixedStatus {
	now := time.Date(2026, 1, 14, 6, 30, 0, 0, time.UTC)
	from := now.Add(-72 * time.Hour).Truncate(time.Hour)
	sum := status.StationSummary{Site: site, Station: station, Reference: "tall", ETLabel: "ETrs", UTCOffsetHours: 10,
		LastReading: ptr(now.Add(-90 * time.Second)), AgeSeconds: ptr(90.0), TodayET: 1.5, TodayHours: 7, YesterdayET: 6.2, YesterdayHours: 24,
		Alerts: []status.AlertView{{Site: site, Station: station, Sensor: "solar", Quantity: "solar", Kind: "night-solar", Severity: "warning",
			Message: "night Rs 35 W/m2 " + evil, Value: ptr(35.0), Limit: ptr(10.0), Since: ptr(now.Add(-3 * time.Hour)), Updated: now}}}
	st := status.StationPage{Version: 1, Summary: sum, From: from, To: now, RevisedHours: 1, FilledHours: 1, FlaggedHours: 1}
	for i := range 72 {
		t := from.Add(time.Duration(i) * time.Hour)
		h := status.HourView{Start: t, Local: t.Add(10 * time.Hour).Format("2006-01-02T15:04"), Complete: true, Day: i%24 < 12,
			AirTemp: ptr(15 + float64(i%24)/2), RH: ptr(60.0), Rso: ptr(float64(i%24) / 10)}
		if i%3 != 0 {
			h.ET, h.Rs = ptr(0.1+float64(i%24)/50), ptr(float64(i%24)/12)
		}
		if i == 5 {
			h.Revision = 1
		}
		if i == 7 {
			h.Fill, h.Flags = "rs-hargreaves", []string{"solar excluded " + evil}
		}
		st.Hours = append(st.Hours, h)
	}
	zs := status.ZoneSummary{Site: site, Zone: zone, Station: station, UTCOffsetHours: 10, Depletion: 9.5, TAW: 88, RAW: 44, Trigger: 8, Target: 2,
		Hold:    &status.HoldView{Scope: "zone", Until: ptr(now.Add(5 * time.Hour)), Reason: "spraying " + evil},
		NextRun: &status.PlanView{Start: now.Add(10 * time.Hour), Minutes: 25, Cycles: 2}}
	zn := status.ZonePage{Version: 1, Summary: zs, From: now.Add(-14 * 24 * time.Hour), To: now, StressHours: 3}
	for i := range 14 * 24 {
		zn.Steps = append(zn.Steps, status.StepView{Time: zn.From.Add(time.Duration(i) * time.Hour), Kind: "hour", Depletion: float64(i%48) / 5, RAW: 44, TAW: 88, Ks: 1})
	}
	for d := range 14 {
		day := status.DayView{Date: zn.From.AddDate(0, 0, d).Format(time.DateOnly), ETc: 4}
		if d%3 == 0 {
			day.Irrigation = 6
		}
		if d == 4 {
			day.EffRain = 3.2
		}
		zn.Days = append(zn.Days, day)
	}
	zn.Runs = []status.RunView{{ID: zone + "-r1", Start: now.Add(-20 * time.Hour), Cycle: 1, Cycles: 1, Minutes: 30, State: "finished",
		MinutesRun: ptr(29.5), VolumeL: ptr(12000.0), Credit: 5.4, Credited: true}}
	al := status.AlertsPage{Version: 1, Generated: now, Active: sum.Alerts,
		Cleared: []status.AlertView{{Site: site, Station: station, Sensor: "rh", Quantity: "rel_humidity", Kind: "stuck", Severity: "warning",
			Message: "rh unchanged for 6 h", Updated: now.Add(-time.Hour), Cleared: ptr(now.Add(-time.Hour))}}}
	ov := status.Overview{Version: 1, Generated: now, Stations: []status.StationSummary{sum}, Zones: []status.ZoneSummary{zs}, ActiveAlerts: 1}
	return &fixedStatus{ov: ov, st: st, zn: zn, al: al}
}

func statusGet(t *testing.T, u string, hdr map[string]string) (*http.Response, string) {
	t.Helper()
	req, err := http.NewRequest(http.MethodGet, u, nil)
	require.NoError(t, err)
	for k, v := range hdr {
		req.Header.Set(k, v)
	}
	c := &http.Client{CheckRedirect: func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }}
	resp, err := c.Do(req)
	require.NoError(t, err)
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	require.NoError(t, err)
	return resp, string(b)
}

// TestStatusPages: every page and API route answers 200 with its content;
// unknown stations and zones 404; the pages carry no script.
func TestStatusPages(t *testing.T) {
	src := sample("tallowwood", "orchard", "apple-block-4")
	base := start(t, Options{Status: src})
	for _, tc := range []struct {
		path, ctype string
		want        []string
	}{
		{"/", "text/html", []string{"orchard", "apple-block-4", "ETrs today", "1.50", "6.20", "1 min ago", "next run", "25 min × 2 cycles", "RAW 44.0", "TAW 88.0", `href="/report"`, "1 active alert"}},
		{"/stations/tallowwood/orchard", "text/html", []string{"Hourly ETrs (mm), last 72 hours", "revised (1)", "rs-hargreaves", `class="rs"`, `class="rso"`, `class="temp"`, `class="rh"`}},
		{"/zones/tallowwood/apple-block-4", "text/html", []string{"stress hours in 14 days", "29.5 min", "12000 L", "5.4 mm", `class="depletion"`, "refill"}},
		{"/alerts", "text/html", []string{"Active alerts", "night-solar", "rh unchanged for 6 h", "Cleared in the last 7 days"}},
		{"/api/v1/overview", "application/json", []string{`"active_alerts": 1`, `"depletion_mm": 9.5`}},
		{"/api/v1/stations/tallowwood/orchard", "application/json", []string{`"et_label": "ETrs"`, `"hours": [`}},
		{"/api/v1/zones/tallowwood/apple-block-4", "application/json", []string{`"trigger_mm": 8`, `"runs": [`}},
		{"/api/v1/alerts", "application/json", []string{`"cleared": [`, `"kind": "night-solar"`}},
	} {
		resp, body := statusGet(t, base+tc.path, nil)
		require.Equal(t, http.StatusOK, resp.StatusCode, "%s: %s", tc.path, body)
		assert.Contains(t, resp.Header.Get("Content-Type"), tc.ctype, tc.path)
		for _, w := range tc.want {
			assert.Contains(t, body, w, tc.path)
		}
		if tc.ctype == "text/html" {
			assert.NotContains(t, body, "<script", "%s: no script on the pages", tc.path)
			assert.Contains(t, body, `name="viewport"`, tc.path)
			assert.Contains(t, resp.Header.Get("Content-Security-Policy"), "default-src 'none'", tc.path)
		}
	}
	for _, p := range []string{"/stations/tallowwood/nope", "/zones/nope/apple-block-4", "/api/v1/stations/x/y", "/api/v1/zones/x/y"} {
		resp, body := statusGet(t, base+p, nil)
		assert.Equal(t, http.StatusNotFound, resp.StatusCode, p)
		assert.Contains(t, body, "not configured", p)
	}
}

// TestStatusZoneDue: a zone at or past its trigger with no run planned
// says it is due, so the overview does not read "none planned" as "fine".
func TestStatusZoneDue(t *testing.T) {
	src := sample("s", "st", "z")
	src.ov.Zones[0].NextRun = nil
	src.ov.Zones[0].Hold = nil
	src.ov.Zones[0].Depletion = 12 // trigger 8
	base := start(t, Options{Status: src})
	_, body := statusGet(t, base+"/", nil)
	assert.Contains(t, body, "due: waits for its watering window")
	src.ov.Zones[0].Depletion = 5
	_, body = statusGet(t, base+"/", nil)
	assert.NotContains(t, body, "due:")
	assert.Contains(t, body, "none planned")
}

// TestStatusChartsMatchAPI: the station page draws one ET bar per hour
// with ET, Rs and Rso lines with one point per hour having them, and the
// zone page one depletion point per step and one bar per day with water.
func TestStatusChartsMatchAPI(t *testing.T) {
	src := sample("tallowwood", "orchard", "apple-block-4")
	base := start(t, Options{Status: src})
	var pg status.StationPage
	_, body := statusGet(t, base+"/api/v1/stations/tallowwood/orchard", nil)
	require.NoError(t, json.Unmarshal([]byte(body), &pg))
	withET, withRs, withRso := 0, 0, 0
	for _, h := range pg.Hours {
		if h.ET != nil {
			withET++
		}
		if h.Rs != nil {
			withRs++
		}
		if h.Rso != nil {
			withRso++
		}
	}
	_, html := statusGet(t, base+"/stations/tallowwood/orchard", nil)
	assert.Equal(t, withET, strings.Count(html, `class="bar et"`))
	assert.Equal(t, withRs, points(t, html, "rs"))
	assert.Equal(t, withRso, points(t, html, "rso"))

	var zp status.ZonePage
	_, body = statusGet(t, base+"/api/v1/zones/tallowwood/apple-block-4", nil)
	require.NoError(t, json.Unmarshal([]byte(body), &zp))
	water, rain := 0, 0
	for _, d := range zp.Days {
		if d.Irrigation > 0 {
			water++
		}
		if d.EffRain > 0 {
			rain++
		}
	}
	_, html = statusGet(t, base+"/zones/tallowwood/apple-block-4", nil)
	assert.Equal(t, len(zp.Steps), points(t, html, "depletion"))
	assert.Equal(t, water, strings.Count(html, `class="bar irrigation"`))
	assert.Equal(t, rain, strings.Count(html, `class="bar rain"`))
}

// points counts the points of the polyline of the given class.
func points(t *testing.T, html, class string) int {
	t.Helper()
	m := regexp.MustCompile(`<polyline class="` + class + `" points="([^"]*)"`).FindStringSubmatch(html)
	require.NotNil(t, m, "polyline %s", class)
	return len(strings.Fields(m[1]))
}

// TestStatusEscapesIDs: ids and messages from the configuration and the
// sensors come out escaped on every page, in text and in links.
func TestStatusEscapesIDs(t *testing.T) {
	src := sample(evil, evil, evil)
	base := start(t, Options{Status: src})
	esc := url.PathEscape(evil)
	for _, p := range []string{"/", "/stations/" + esc + "/" + esc, "/zones/" + esc + "/" + esc, "/alerts"} {
		resp, body := statusGet(t, base+p, nil)
		require.Equal(t, http.StatusOK, resp.StatusCode, "%s: %s", p, body)
		assert.NotContains(t, body, "<script", p)
		assert.Contains(t, body, "&lt;script&gt;", p)
	}
	_, body := statusGet(t, base+"/", nil)
	assert.Contains(t, body, `href="/stations/%3cscript%3ealert%28%22x%22%29%3c/script%3e/`, "ids in links are URL-escaped")
}

// TestStatusToken: with a token, pages and API answer 401 without it, 200
// with the Bearer header; ?token= sets an HttpOnly SameSite=Strict cookie
// and redirects to the address without it; /healthz and /metrics stay open.
func TestStatusToken(t *testing.T) {
	const tok = "3f9c1e0b7d2a4c58e6f1a9b0c3d7e2f4"
	base := start(t, Options{Status: sample("s", "st", "z"), Token: tok})
	for _, p := range []string{"/", "/stations/s/st", "/zones/s/z", "/alerts", "/api/v1/overview", "/api/v1/stations/s/st", "/api/v1/zones/s/z", "/api/v1/alerts"} {
		resp, body := statusGet(t, base+p, nil)
		assert.Equal(t, http.StatusUnauthorized, resp.StatusCode, p)
		assert.Contains(t, body, "Authorization: Bearer", p)
		resp, _ = statusGet(t, base+p, map[string]string{"Authorization": "Bearer wrong-" + tok})
		assert.Equal(t, http.StatusUnauthorized, resp.StatusCode, p)
		resp, _ = statusGet(t, base+p, map[string]string{"Authorization": "Bearer " + tok})
		assert.Equal(t, http.StatusOK, resp.StatusCode, p)
	}
	resp, _ := statusGet(t, base+"/zones/s/z?token=nope", nil)
	assert.Equal(t, http.StatusUnauthorized, resp.StatusCode)
	resp, _ = statusGet(t, base+"/zones/s/z?token="+tok, nil)
	require.Equal(t, http.StatusSeeOther, resp.StatusCode)
	assert.Equal(t, "/zones/s/z", resp.Header.Get("Location"))
	cookies := resp.Cookies()
	require.Len(t, cookies, 1)
	c := cookies[0]
	assert.True(t, c.HttpOnly)
	assert.Equal(t, http.SameSiteStrictMode, c.SameSite)
	resp, _ = statusGet(t, base+"/zones/s/z", map[string]string{"Cookie": c.Name + "=" + c.Value})
	assert.Equal(t, http.StatusOK, resp.StatusCode, "the cookie admits")
	resp, _ = statusGet(t, base+"/zones/s/z", map[string]string{"Cookie": c.Name + "=x" + c.Value})
	assert.Equal(t, http.StatusUnauthorized, resp.StatusCode)
	for _, p := range []string{"/healthz", "/metrics"} {
		resp, _ := statusGet(t, base+p, nil)
		assert.Equal(t, http.StatusOK, resp.StatusCode, p)
	}
}

// TestStatusDisabled: without a read model the pages answer 503, and the
// operational routes keep working.
func TestStatusDisabled(t *testing.T) {
	base := start(t, Options{})
	resp, body := statusGet(t, base+"/", nil)
	assert.Equal(t, http.StatusServiceUnavailable, resp.StatusCode)
	assert.Contains(t, body, "not enabled")
	resp, _ = statusGet(t, base+"/healthz", nil)
	assert.Equal(t, http.StatusOK, resp.StatusCode)
}

// TestStatusReadError: a failing read model gives 500 naming the cause.
func TestStatusReadError(t *testing.T) {
	src := sample("s", "st", "z")
	src.failed = fmt.Errorf("history range: disk gone")
	base := start(t, Options{Status: src})
	for _, p := range []string{"/", "/api/v1/overview", "/alerts"} {
		resp, body := statusGet(t, base+p, nil)
		assert.Equal(t, http.StatusInternalServerError, resp.StatusCode, p)
		assert.Contains(t, body, "disk gone", p)
	}
}
