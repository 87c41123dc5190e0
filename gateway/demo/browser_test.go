package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/report"
	"etpulse/gateway/status"
)

// chromiumPath returns the browser of ETPULSE_TEST_CHROMIUM; the test skips
// without it, unless ETPULSE_TEST_SERVERS=required (deploy/test.sh).
func chromiumPath(t *testing.T) string {
	t.Helper()
	p := os.Getenv("ETPULSE_TEST_CHROMIUM")
	if p == "" {
		if os.Getenv("ETPULSE_TEST_SERVERS") == "required" {
			t.Fatal("ETPULSE_TEST_CHROMIUM is not set (deploy/test.sh installs chromium and sets it)")
		}
		t.Skip("ETPULSE_TEST_CHROMIUM not set: no browser to test the status pages with")
	}
	return p
}

// getJSON decodes the JSON at url into v.
func getJSON(t *testing.T, url string, v any) {
	t.Helper()
	resp, err := http.Get(url)
	require.NoError(t, err)
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	require.NoError(t, err)
	require.Equal(t, http.StatusOK, resp.StatusCode, "%s: %s", url, b)
	require.NoError(t, json.Unmarshal(b, v), url)
}

// TestBrowserStatusPages runs the demo farm for two simulated days with its
// status pages kept up (as `etpulse demo --serve` does), and loads the
// overview, a station and a zone page in headless Chromium, at a desktop
// and at a phone-sized viewport: the charts have as many bars and points as
// the JSON API says, the console stays free of errors, the page does not
// scroll sideways, and a screenshot of each lands in the test's directory.
func TestBrowserStatusPages(t *testing.T) {
	chromium := chromiumPath(t)
	dir := t.TempDir() // the screenshots
	ctx, cancel := context.WithTimeout(context.Background(), 4*time.Minute)
	defer cancel()

	// The demo, kept serving until the test ends.
	demoCtx, stopDemo := context.WithCancel(ctx)
	served := make(chan string, 1)
	runErr := make(chan error, 1)
	go func() {
		_, err := Run(demoCtx, RunOptions{Days: 2, Seed: 1, Serve: true, Faults: DriftFaults(DefaultStart), Setup: ShowAlerts,
			Served: func(url string) { served <- url }})
		runErr <- err
	}()
	t.Cleanup(func() {
		stopDemo()
		require.NoError(t, <-runErr)
	})
	var base string
	select {
	case base = <-served:
	case err := <-runErr:
		runErr <- err
		t.Fatalf("demo ended before serving: %v", err)
	case <-ctx.Done():
		t.Fatal("demo did not finish its two days in time")
	}
	base = strings.TrimSuffix(base, "/")

	var ov status.Overview
	getJSON(t, base+"/api/v1/overview", &ov)
	require.NotEmpty(t, ov.Stations)
	require.NotEmpty(t, ov.Zones)
	st, zn := ov.Stations[0], ov.Zones[0]
	// The overview links the morning report: it answers too.
	var rep report.Report
	getJSON(t, base+"/api/v1/report?site="+st.Site, &rep)
	require.NotEmpty(t, rep.Stations, "the report of the demo's last day lists its stations")
	var sp status.StationPage
	getJSON(t, base+"/api/v1/stations/"+st.Site+"/"+st.Station, &sp)
	var zp status.ZonePage
	getJSON(t, base+"/api/v1/zones/"+zn.Site+"/"+zn.Zone, &zp)

	// Expected shapes, from the API.
	etBars, rsPts, rsoPts := 0, 0, 0
	for _, h := range sp.Hours {
		if h.ET != nil {
			etBars++
		}
		if h.Rs != nil {
			rsPts++
		}
		if h.Rso != nil {
			rsoPts++
		}
	}
	irrigation, rain := 0, 0
	for _, d := range zp.Days {
		if d.Irrigation > 0 {
			irrigation++
		}
		if d.EffRain > 0 {
			rain++
		}
	}
	require.Positive(t, etBars, "two simulated days give hours with ET")
	require.Positive(t, len(zp.Steps), "two simulated days give balance steps")

	pages := []struct {
		name, path string
		counts     map[string]int // JavaScript expression -> expected value
	}{
		{"overview", "/", map[string]int{
			`document.querySelectorAll('a[href^="/stations/"]').length`: len(ov.Stations),
			`document.querySelectorAll('a[href^="/zones/"]').length`:    len(ov.Zones),
			`document.querySelectorAll('svg rect.bar').length`:          len(ov.Zones), // one depletion bar per zone
		}},
		{"station", "/stations/" + st.Site + "/" + st.Station, map[string]int{
			`document.querySelectorAll('rect.bar.et').length`:      etBars,
			`document.querySelector('polyline.rs').points.length`:  rsPts,
			`document.querySelector('polyline.rso').points.length`: rsoPts,
		}},
		{"report", "/report?site=" + st.Site, map[string]int{
			`document.querySelectorAll('.cards .card').length`:       len(rep.Stations),
			`document.querySelectorAll('a[href^="/zones/"]').length`: len(rep.Zones),
		}},
		{"zone", "/zones/" + zn.Site + "/" + zn.Zone, map[string]int{
			`document.querySelector('polyline.depletion').points.length`: len(zp.Steps),
			`document.querySelectorAll('rect.bar.irrigation').length`:    irrigation,
			`document.querySelectorAll('rect.bar.rain').length`:          rain,
		}},
	}
	for _, vp := range []struct {
		name string
		w, h int64
	}{{"desktop", 1280, 900}, {"phone", 390, 844}} {
		t.Run(vp.name, func(t *testing.T) {
			browse(t, ctx, chromium, vp.w, vp.h, func(bctx context.Context, problems func() []string) {
				for _, pg := range pages {
					require.NoError(t, chromedp.Do(bctx, chromedp.Navigate(base+pg.path), chromedp.WaitReady("main")), pg.name)
					overflow, err := chromedp.Run(bctx, chromedp.Evaluate[bool](`document.documentElement.scrollWidth > window.innerWidth + 1`))
					require.NoError(t, err, pg.name)
					assert.False(t, overflow, "%s (%s): the page scrolls sideways", pg.name, vp.name)
					for expr, want := range pg.counts {
						got, err := chromedp.Run(bctx, chromedp.Evaluate[int](expr))
						require.NoError(t, err, "%s: %s", pg.name, expr)
						assert.Equal(t, want, got, "%s (%s): %s", pg.name, vp.name, expr)
					}
					shot, err := chromedp.Run(bctx, chromedp.FullScreenshot(90))
					require.NoError(t, err, pg.name)
					file := filepath.Join(dir, fmt.Sprintf("%s-%s.png", pg.name, vp.name))
					require.NoError(t, os.WriteFile(file, shot, 0o644))
					t.Logf("screenshot %s (%d bytes)", file, len(shot))
				}
				assert.Empty(t, problems(), "console errors (%s)", vp.name)
			})
		})
	}
}

// browse starts a headless Chromium at a w x h viewport, calls fn with its
// context and a function returning the console errors and exceptions seen,
// and stops the browser (its process is killed when the allocator's
// context ends).
func browse(t *testing.T, ctx context.Context, chromium string, w, h int64, fn func(context.Context, func() []string)) {
	t.Helper()
	opts := append(chromedp.DefaultExecAllocatorOptions[:],
		chromedp.ExecPath(chromium), chromedp.NoSandbox, chromedp.WindowSize(int(w), int(h)),
		chromedp.UserDataDir(t.TempDir()))
	actx, cancelAlloc := chromedp.NewExecAllocator(ctx, opts...)
	defer cancelAlloc()
	bctx, cancelBrowser := chromedp.NewContext(actx)
	defer cancelBrowser()
	bctx, cancelTimeout := context.WithTimeout(bctx, 90*time.Second)
	defer cancelTimeout()

	require.NoError(t, chromedp.Do(bctx, chromedp.EmulateViewport(w, h)))
	// Console errors, uncaught exceptions and browser log errors (a failed
	// request, a refused style) until the browser context ends.
	messages := chromedp.Console(bctx)
	var mu sync.Mutex
	var seen []string
	collected := make(chan struct{})
	go func() {
		defer close(collected)
		for m, err := range messages {
			if err != nil {
				return
			}
			if m.Type == chromedp.ConsoleError || m.IsException() {
				mu.Lock()
				seen = append(seen, fmt.Sprintf("%s: %s", m.URL, m))
				mu.Unlock()
			}
		}
	}()
	defer func() {
		cancelBrowser()
		<-collected
	}()
	fn(bctx, func() []string {
		mu.Lock()
		defer mu.Unlock()
		return append([]string(nil), seen...)
	})
}
