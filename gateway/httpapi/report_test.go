package httpapi

import (
	"context"
	"errors"
	"net/http"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/report"
)

// fixedReport answers one site's report; the report package's own tests
// build real ones from a state file. Here only the HTTP side is under test.
type fixedReport struct{ rep report.Report }

func (f fixedReport) Report(site, date string) (report.Report, error) {
	if site != "" && site != f.rep.Site {
		return report.Report{}, &report.InputError{Param: "site", Problem: "unknown site " + site}
	}
	if date != "" && date != f.rep.Date {
		return report.Report{}, &report.InputError{Param: "date", Problem: "no such day " + date}
	}
	return f.rep, nil
}

func sampleReport(site, station, zone string) report.Report {
	now := time.Date(2026, 1, 14, 6, 30, 0, 0, time.UTC)
	return report.Report{Version: report.Version, Site: site, Date: "2026-01-13", Generated: now,
		Stations: []report.Station{{Station: station, UTCOffsetHours: 10, ET: []report.ET{{Reference: "tall", Label: "ETrs", MM: 6.21, Hours: 24}},
			RainMM: 1.2, HoursComplete: 23, HoursFilled: 1,
			Alerts: []report.Alert{{Time: now.Add(-20 * time.Hour), Sensor: "rs", Kind: "night-solar", Message: "night Rs " + evil}}}},
		Zones: []report.Zone{{Zone: zone, Station: station, ETcMM: 4.3, DepletionEndMM: ptr(9.5), RAWMM: ptr(44.0), TAWMM: ptr(88.0), StressHours: 2,
			Plan: []report.Run{{ID: zone + "-c1", Start: now.Add(12 * time.Hour), Minutes: 25, Cycle: 1, Cycles: 2, State: "planned"}}}},
	}
}

// startWithReport runs a server with the status pages and the report.
func startWithReport(t *testing.T, opt Options, b ReportBuilder) string {
	t.Helper()
	opt.Addr = "127.0.0.1:0"
	s := New(opt)
	if b != nil {
		s.SetReport(b)
	}
	require.NoError(t, s.Listen())
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- s.Run(ctx) }()
	t.Cleanup(func() {
		cancel()
		require.NoError(t, <-done)
	})
	return "http://" + s.Addr()
}

// TestReportRoutes: the page and the JSON route answer 200 with the
// report, ids from the configuration escaped on the page; a bad site or
// date is 400 with the parameter; FetchReport reads both answers.
func TestReportRoutes(t *testing.T) {
	rep := sampleReport("s"+evil, "st", "z")
	base := startWithReport(t, Options{Status: sample("s", "st", "z")}, fixedReport{rep})

	resp, body := statusGet(t, base+ReportPagePath, nil)
	require.Equal(t, http.StatusOK, resp.StatusCode, body)
	assert.Contains(t, body, "6.21")
	assert.Contains(t, body, "ETrs")
	assert.Contains(t, body, "25</td>", "the planned run")
	assert.NotContains(t, body, "<script>")
	assert.Contains(t, body, "&lt;script&gt;")
	assert.Contains(t, body, `name="viewport"`, "readable on a phone")

	resp, body = statusGet(t, base+ReportPath+"?date=2026-01-13", nil)
	require.Equal(t, http.StatusOK, resp.StatusCode, body)
	assert.Equal(t, "application/json", resp.Header.Get("Content-Type"))
	assert.Contains(t, body, `"et_mm": 6.21`)

	resp, body = statusGet(t, base+ReportPath+"?date=2026-02-30", nil)
	assert.Equal(t, http.StatusBadRequest, resp.StatusCode)
	assert.Contains(t, body, `"param":"date"`)

	got, err := FetchReport(context.Background(), base, rep.Site, "", "")
	require.NoError(t, err)
	assert.Equal(t, rep.Stations[0].ET, got.Stations[0].ET)
	_, err = FetchReport(context.Background(), base, "elsewhere", "", "")
	var ie *report.InputError
	require.True(t, errors.As(err, &ie), "%v", err)
	assert.Equal(t, "site", ie.Param)
}

// TestReportToken: with a token the report needs it like the status pages;
// FetchReport sends it.
func TestReportToken(t *testing.T) {
	const tok = "3f9c1e0b7d2a4c58e6f1a9b0c3d7e2f4"
	rep := sampleReport("s", "st", "z")
	base := startWithReport(t, Options{Status: sample("s", "st", "z"), Token: tok}, fixedReport{rep})
	for _, p := range []string{ReportPagePath, ReportPath} {
		resp, _ := statusGet(t, base+p, nil)
		assert.Equal(t, http.StatusUnauthorized, resp.StatusCode, p)
		resp, _ = statusGet(t, base+p, map[string]string{"Authorization": "Bearer " + tok})
		assert.Equal(t, http.StatusOK, resp.StatusCode, p)
	}
	_, err := FetchReport(context.Background(), base, "", "", "")
	require.Error(t, err)
	assert.Contains(t, err.Error(), "401")
	_, err = FetchReport(context.Background(), base, "", "", tok)
	require.NoError(t, err)
}

// TestReportDisabled: without a report builder the routes answer 503 and
// FetchReport does not mistake the listener for no gateway.
func TestReportDisabled(t *testing.T) {
	base := startWithReport(t, Options{Status: sample("s", "st", "z")}, nil)
	resp, body := statusGet(t, base+ReportPagePath, nil)
	assert.Equal(t, http.StatusServiceUnavailable, resp.StatusCode)
	assert.True(t, strings.Contains(body, "not enabled"), body)
	_, err := FetchReport(context.Background(), base, "", "", "")
	require.Error(t, err)
	assert.NotErrorIs(t, err, ErrNoGateway)
}
