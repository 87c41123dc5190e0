package httpapi

import (
	"bytes"
	"fmt"
	"html/template"
	"math"
	"net/http"
	"time"

	"etpulse/gateway/status"
)

// The pages: one layout, one template per page, all rendered from the
// status API's structs. Colours carry meaning: blue is water (irrigation,
// rain, refill), orange-red is an alert or a zone due; everything else is
// ink and grey.
const layoutHTML = `{{define "layout"}}<!doctype html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<link rel="icon" href="data:,">
<title>{{.Title}} · etpulse</title>
<style>
:root{--ink:#1d2327;--muted:#5f6b73;--line:#d5dadd;--bg:#f7f8f6;--card:#fff;--water:#1769aa;--water2:#8dbbe0;--alert:#c2410c;--soil:#7a6a58}
*{box-sizing:border-box}body{margin:0;font:15px/1.4 system-ui,sans-serif;color:var(--ink);background:var(--bg)}
header{display:flex;flex-wrap:wrap;gap:.2rem 1rem;align-items:baseline;padding:.6rem 1rem;border-bottom:3px solid var(--water);background:var(--card)}
header b{font-size:1.1rem}nav a{margin-right:.9rem;color:var(--ink)}main{padding:0 1rem 2rem;max-width:980px}
h1{font-size:1.25rem;margin:1rem 0 .3rem}h2{font-size:1.05rem;margin:1.2rem 0 .4rem}
.cards{display:grid;grid-template-columns:repeat(auto-fill,minmax(260px,1fr));gap:.7rem}
.card{background:var(--card);border:1px solid var(--line);border-radius:6px;padding:.6rem .8rem}
.card.warn{border-left:5px solid var(--alert)}.big{font-size:1.5rem;font-weight:600}.muted{color:var(--muted)}
.alert{color:var(--alert);font-weight:600}.due{color:var(--alert)}
table{border-collapse:collapse;width:100%;background:var(--card)}th,td{text-align:left;padding:.3rem .4rem;border-bottom:1px solid var(--line);vertical-align:top}
th{font-weight:600;color:var(--muted);font-size:.85rem}.scroll{overflow-x:auto}
svg{width:100%;height:auto;display:block;background:var(--card)}svg.mini{max-width:320px;background:none}svg text{font-size:11px;fill:var(--muted)}
.night{fill:#e9ecef}.et{fill:#4b5a63}.tick{stroke:var(--line)}.base{stroke:var(--muted)}
.rs{fill:none;stroke:#d99a00;stroke-width:1.6}.rso{fill:none;stroke:var(--muted);stroke-width:1.2;stroke-dasharray:4 3}
.temp{fill:none;stroke:#8b3a62;stroke-width:1.6}.rh{fill:none;stroke:var(--water2);stroke-width:1.6}
.depletion{fill:none;stroke:var(--soil);stroke-width:2}.taw{stroke:var(--ink);stroke-dasharray:2 2}.raw{stroke:var(--muted);stroke-dasharray:6 3}
.trigger{stroke:var(--alert);stroke-dasharray:6 3}.target{stroke:var(--water);stroke-dasharray:6 3}
text.trigger{fill:var(--alert);stroke:none}text.target{fill:var(--water);stroke:none}text.taw,text.raw{stroke:none}
.irrigation{fill:var(--water)}.rain{fill:var(--water2)}.track{fill:#e9ecef}.fill{fill:var(--soil)}.fill.due{fill:var(--alert)}
.mark-revised{fill:#6d5bd0}.mark-filled{fill:#d99a00}.mark-flag{fill:var(--alert)}
.key span{display:inline-block;margin-right:.8rem;font-size:.85rem}.key i{display:inline-block;width:.9em;height:.9em;margin-right:.25em;vertical-align:-.1em}
.t{white-space:nowrap}
@media (max-width:600px){main{padding:0 .5rem 1.5rem}th,td{padding:.25rem}.big{font-size:1.3rem}svg text{font-size:19px}}
</style></head><body>
<header><b>etpulse</b><nav><a href="/">overview</a><a href="/alerts">alerts</a><a href="/report">report</a></nav><span class="muted">{{.Now}}</span></header>
<main>{{template "body" .}}</main></body></html>{{end}}
{{define "svg"}}<svg viewBox="0 0 {{.W}} {{.H}}"{{if lt .W 400.0}} class="mini"{{end}} role="img" aria-label="{{.Title}}"><title>{{.Title}}</title>
{{range .Shades}}<rect class="{{.Class}}" x="{{f2 .X}}" y="{{f2 .Y}}" width="{{f2 .W}}" height="{{f2 .H}}"/>{{end}}
{{range .Rules}}<line class="{{.Class}}" x1="{{f2 .X1}}" y1="{{f2 .Y1}}" x2="{{f2 .X2}}" y2="{{f2 .Y2}}"/>{{end}}
{{range .Bars}}<rect class="bar {{.Class}}" x="{{f2 .X}}" y="{{f2 .Y}}" width="{{f2 .W}}" height="{{f2 .H}}"><title>{{.Title}}</title></rect>{{end}}
{{range .Lines}}<polyline class="{{.Class}}" points="{{.Points}}"/>{{end}}
{{range .Marks}}<rect class="mark {{.Class}}" x="{{f2 .X}}" y="{{f2 .Y}}" width="{{f2 .W}}" height="{{f2 .H}}"><title>{{.Title}}</title></rect>{{end}}
{{range .Over}}<line class="{{.Class}}" x1="{{f2 .X1}}" y1="{{f2 .Y1}}" x2="{{f2 .X2}}" y2="{{f2 .Y2}}"/>{{end}}
{{range .Texts}}<text class="{{.Class}}" x="{{f2 .X}}" y="{{f2 .Y}}" text-anchor="{{.Anchor}}">{{.Text}}</text>{{end}}
</svg>{{end}}
{{define "alertrows"}}<div class="scroll"><table><tr><th>where</th><th>kind</th><th>evidence</th><th>since</th><th>updated</th>{{if .Cleared}}<th>cleared</th>{{end}}</tr>
{{range .List}}<tr><td>{{.Site}}/{{.Station}}{{if .Sensor}}/{{.Sensor}}{{end}}{{if .Quantity}} ({{.Quantity}}){{end}}</td><td class="{{if not .Cleared}}alert{{end}}">{{.Kind}} <span class="muted">{{.Severity}}</span></td><td>{{.Message}}{{if .Value}} <span class="muted">value {{num .Value}}{{if .Limit}}, limit {{num .Limit}}{{end}}</span>{{end}}</td><td>{{if .Since}}{{utc .Since}}{{end}}</td><td>{{utc .Updated}}</td>{{if $.Cleared}}<td>{{if .Cleared}}{{utc .Cleared}}{{end}}</td>{{end}}</tr>
{{else}}<tr><td colspan="6" class="muted">none</td></tr>{{end}}</table></div>{{end}}`

const overviewHTML = `{{define "body"}}{{with .Data}}
<h1>Stations</h1><div class="cards">{{range .Stations}}
<div class="card{{if .Alerts}} warn{{end}}"><a href="/stations/{{.Site}}/{{.Station}}"><b>{{.Station}}</b></a> <span class="muted">{{.Site}} · {{.Reference}}</span>
<div>{{.ETLabel}} today <span class="big">{{printf "%.2f" .TodayET}}</span> mm <span class="muted">({{.TodayHours}} h)</span></div>
<div>yesterday {{printf "%.2f" .YesterdayET}} mm <span class="muted">({{.YesterdayHours}} h)</span></div>
<div>last reading {{if .AgeSeconds}}<span class="{{if gt (deref .AgeSeconds) 1800.0}}alert{{end}}">{{age .AgeSeconds}} ago</span>{{else}}<span class="alert">never</span>{{end}}</div>
{{range .Alerts}}<div class="alert">⚠ {{.Kind}}{{if .Sensor}} · {{.Sensor}}{{end}}: {{.Message}}</div>{{end}}
</div>{{end}}</div>
<h1>Zones</h1>{{if not .Zones}}<p class="muted">no irrigation zones configured</p>{{end}}
<div class="cards">{{range .Zones}}{{$zo := .UTCOffsetHours}}<div class="card{{if ge .Depletion .Trigger}} warn{{end}}"><a href="/zones/{{.Site}}/{{.Zone}}"><b>{{.Zone}}</b></a> <span class="muted">{{.Site}} · {{.Station}}</span>
{{template "svg" (bar .)}}
<div>depletion <b>{{printf "%.1f" .Depletion}}</b> mm · RAW {{printf "%.1f" .RAW}} · TAW {{printf "%.1f" .TAW}}{{if .Stressed}} · <span class="alert">stress (Ks &lt; 1)</span>{{end}}</div>
<div>{{if .Hold}}<span class="alert">hold ({{.Hold.Scope}}){{if .Hold.Until}} until {{local .Hold.Until $zo}}{{end}}: {{.Hold.Reason}}</span>{{else}}<span class="muted">no hold</span>{{end}}</div>
<div>next run {{with .NextRun}}{{local .Start $zo}} · {{.Minutes}} min × {{.Cycles}} cycle{{if gt .Cycles 1}}s{{end}}{{else}}{{if and (not .Hold) (gt .Trigger 0.0) (ge .Depletion .Trigger)}}<span class="alert">due: waits for its watering window</span>{{else}}<span class="muted">none planned</span>{{end}}{{end}}</div>
</div>{{end}}</div>
<p class="key"><span><i style="background:var(--soil)"></i>depletion</span><span><i style="background:var(--alert)"></i>at or past the trigger</span><span><i style="background:var(--water)"></i>refill target</span></p>
<p>{{if .ActiveAlerts}}<a class="alert" href="/alerts">{{.ActiveAlerts}} active alert{{if gt .ActiveAlerts 1}}s{{end}}</a>{{else}}<a href="/alerts">no active alerts</a>{{end}}</p>
{{end}}{{end}}`

const stationHTML = `{{define "body"}}{{with .Data}}{{$off := .Summary.UTCOffsetHours}}
<h1>{{.Summary.Station}} <span class="muted">{{.Summary.Site}} · {{.Summary.Reference}} reference</span></h1>
<p>{{.Summary.ETLabel}} today {{printf "%.2f" .Summary.TodayET}} mm · yesterday {{printf "%.2f" .Summary.YesterdayET}} mm · last reading {{if .Summary.AgeSeconds}}{{age .Summary.AgeSeconds}} ago{{else}}never{{end}}</p>
{{range .Summary.Alerts}}<p class="alert">⚠ {{.Kind}}{{if .Sensor}} · {{.Sensor}}{{end}}: {{.Message}}</p>{{end}}
<h2>Hourly {{.Summary.ETLabel}} (mm), last {{hours}} hours</h2>
{{template "svg" (etchart .)}}
<p class="key"><span><i style="background:#4b5a63"></i>{{.Summary.ETLabel}} mm/h</span><span><i style="background:#e9ecef"></i>night</span><span><i style="background:#6d5bd0"></i>revised ({{.RevisedHours}})</span><span><i style="background:#d99a00"></i>gap-filled ({{.FilledHours}})</span><span><i style="background:var(--alert)"></i>flagged or incomplete ({{.FlaggedHours}} flagged, {{.IncompleteHours}} incomplete)</span></p>
<h2>Solar radiation Rs against clear-sky Rso</h2>
{{template "svg" (radchart .)}}
<p class="key"><span><i style="background:#d99a00"></i>Rs</span><span><i style="background:#5f6b73"></i>Rso (dashed)</span><span>MJ/m² per hour</span></p>
<h2>Air temperature and humidity</h2>
{{template "svg" (airchart .)}}
<p class="key"><span><i style="background:#8b3a62"></i>T °C (left)</span><span><i style="background:var(--water2)"></i>RH % (right)</span></p>
<h2>Hours with revisions, fills or flags</h2><div class="scroll"><table><tr><th>hour (standard time)</th><th>{{.Summary.ETLabel}} mm</th><th>revision</th><th>fill</th><th>flags</th></tr>
{{range .Hours}}{{if or .Revision .Fill .Flags (not .Complete)}}<tr><td class="t">{{.Local}}</td><td>{{if .ET}}{{printf "%.3f" (deref .ET)}}{{else}}–{{end}}</td><td>{{.Revision}}</td><td>{{.Fill}}</td><td>{{range .Flags}}{{.}}<br>{{end}}{{if not .Complete}}incomplete{{end}}</td></tr>{{end}}{{end}}</table></div>
{{if .ClearedAlerts}}<h2>Recently cleared alerts</h2>{{template "alertrows" (alerts .ClearedAlerts true)}}{{end}}
{{end}}{{end}}`

const zoneHTML = `{{define "body"}}{{with .Data}}{{$off := .Summary.UTCOffsetHours}}
<h1>{{.Summary.Zone}} <span class="muted">{{.Summary.Site}} · ET from {{.Summary.Station}}</span></h1>
{{template "svg" (bar .Summary)}}
<p>depletion <b>{{printf "%.1f" .Summary.Depletion}}</b> mm · trigger {{printf "%.1f" .Summary.Trigger}} · refill to {{printf "%.1f" .Summary.Target}} · RAW {{printf "%.1f" .Summary.RAW}} · TAW {{printf "%.1f" .Summary.TAW}} mm · stress hours in {{days}} days: <span class="{{if .StressHours}}alert{{end}}">{{.StressHours}}</span></p>
<p>{{if .Summary.Hold}}<span class="alert">hold ({{.Summary.Hold.Scope}}){{if .Summary.Hold.Until}} until {{local .Summary.Hold.Until $off}}{{end}}: {{.Summary.Hold.Reason}}</span>{{else}}no hold{{end}} · next run {{with .Summary.NextRun}}{{local .Start $off}}, {{.Minutes}} min × {{.Cycles}}{{else}}{{if and (not .Summary.Hold) (gt .Summary.Trigger 0.0) (ge .Summary.Depletion .Summary.Trigger)}}<span class="alert">due: waits for its watering window</span>{{else}}none planned{{end}}{{end}}</p>
<h2>Depletion (mm), last {{days}} days</h2>
{{template "svg" (depchart .)}}
<p class="key"><span><i style="background:var(--soil)"></i>depletion (down = drier)</span><span><i style="background:var(--alert)"></i>trigger</span><span><i style="background:var(--water)"></i>refill target</span><span>RAW, TAW dashed grey</span></p>
<h2>Irrigation and effective rain (mm per day)</h2>
{{template "svg" (waterchart .)}}
<p class="key"><span><i style="background:var(--water)"></i>irrigation (net, credited)</span><span><i style="background:var(--water2)"></i>effective rain</span></p>
<h2>Last runs</h2><div class="scroll"><table><tr><th>start</th><th>cycle</th><th>commanded</th><th>reported</th><th>volume</th><th>credit</th><th>state</th></tr>
{{range .Runs}}<tr><td class="t">{{local .Start $off}}</td><td>{{.Cycle}}/{{.Cycles}}</td><td class="t">{{.Minutes}} min</td><td class="t">{{if .MinutesRun}}{{printf "%.1f" (deref .MinutesRun)}} min{{else}}–{{end}}</td><td class="t">{{if .VolumeL}}{{printf "%.0f" (deref .VolumeL)}} L{{else}}–{{end}}</td><td class="t">{{if .Credited}}{{printf "%.1f" .Credit}} mm{{else}}–{{end}}</td><td class="{{if or (eq .State "failed") (eq .State "expired")}}alert{{end}}">{{.State}}{{if .Note}} <span class="muted">{{.Note}}</span>{{end}}</td></tr>
{{else}}<tr><td colspan="7" class="muted">no runs yet</td></tr>{{end}}</table></div>
<h2>Days</h2><div class="scroll"><table><tr><th>date</th><th>ETc mm</th><th>eff. rain mm</th><th>irrigation mm</th><th>stress h</th></tr>
{{range .Days}}<tr><td>{{.Date}}</td><td>{{printf "%.1f" .ETc}}</td><td>{{printf "%.1f" .EffRain}}</td><td>{{printf "%.1f" .Irrigation}}</td><td>{{.StressHours}}</td></tr>{{end}}</table></div>
{{end}}{{end}}`

const alertsHTML = `{{define "body"}}{{with .Data}}
<h1>Active alerts</h1>{{template "alertrows" (alerts .Active false)}}
<h1>Cleared in the last 7 days</h1>{{template "alertrows" (alerts .Cleared true)}}
{{end}}{{end}}`

var pageFuncs = template.FuncMap{
	"f2":    f2,
	"deref": func(p *float64) float64 { return *p },
	"num":   func(p *float64) string { return trimNum(*p) },
	"age": func(p *float64) string {
		d := time.Duration(*p * float64(time.Second))
		switch {
		case d < time.Minute:
			return fmt.Sprintf("%d s", int(d.Seconds()))
		case d < 2*time.Hour:
			return fmt.Sprintf("%d min", int(d.Minutes()))
		case d < 72*time.Hour:
			return fmt.Sprintf("%.1f h", d.Hours())
		}
		return fmt.Sprintf("%d days", int(math.Round(d.Hours()/24)))
	},
	"utc": func(t any) string {
		switch v := t.(type) {
		case time.Time:
			return v.UTC().Format("2006-01-02 15:04Z")
		case *time.Time:
			return v.UTC().Format("2006-01-02 15:04Z")
		}
		return ""
	},
	"local": func(t any, off float64) string {
		var v time.Time
		switch x := t.(type) {
		case time.Time:
			v = x
		case *time.Time:
			v = *x
		}
		return localClock(v, off, "Mon 2 Jan 15:04")
	},
	"hours":      func() int { return status.StationHours },
	"days":       func() int { return status.ZoneDays },
	"bar":        depletionBar,
	"etchart":    etChart,
	"radchart":   radiationChart,
	"airchart":   airChart,
	"depchart":   depletionChart,
	"waterchart": waterChart,
	"alerts": func(list []status.AlertView, cleared bool) map[string]any {
		return map[string]any{"List": list, "Cleared": cleared}
	},
}

var pages = map[string]*template.Template{}

func init() {
	for name, body := range map[string]string{"overview": overviewHTML, "station": stationHTML, "zone": zoneHTML, "alerts": alertsHTML} {
		t := template.Must(template.New(name).Funcs(pageFuncs).Parse(layoutHTML))
		pages[name] = template.Must(t.Parse(body))
	}
}

// pageData is what a page template gets.
type pageData struct {
	Title string
	Now   string
	Data  any
}

// render writes a page, buffered, so a template error never leaves half a
// page behind a 200.
func (s *Server) render(w http.ResponseWriter, name, title string, gen time.Time, off float64, data any) {
	var buf bytes.Buffer
	d := pageData{Title: title, Now: "as of " + localClock(gen, off, "Mon 2 Jan 15:04") + fmt.Sprintf(" (UTC%+g)", off), Data: data}
	if err := pages[name].ExecuteTemplate(&buf, "layout", d); err != nil {
		s.fail(w, fmt.Errorf("render %s page: %w", name, err))
		return
	}
	w.Header().Set("Content-Type", "text/html; charset=utf-8")
	w.Header().Set("Cache-Control", "no-store")
	w.Header().Set("Content-Security-Policy", "default-src 'none'; style-src 'unsafe-inline'; img-src 'self' data:; form-action 'none'; frame-ancestors 'none'")
	w.Header().Set("X-Content-Type-Options", "nosniff")
	w.Write(buf.Bytes())
}

func (s *Server) overviewPage(w http.ResponseWriter, r *http.Request, rd StatusReader) {
	v, err := rd.Overview()
	if err != nil {
		s.fail(w, err)
		return
	}
	off := 0.0
	if len(v.Stations) > 0 {
		off = v.Stations[0].UTCOffsetHours
	}
	s.render(w, "overview", "overview", v.Generated, off, v)
}

func (s *Server) stationPage(w http.ResponseWriter, r *http.Request, rd StatusReader) {
	v, err := rd.Station(r.PathValue("site"), r.PathValue("station"))
	if err != nil {
		s.fail(w, err)
		return
	}
	s.render(w, "station", v.Summary.Station, v.To, v.Summary.UTCOffsetHours, v)
}

func (s *Server) zonePage(w http.ResponseWriter, r *http.Request, rd StatusReader) {
	v, err := rd.Zone(r.PathValue("site"), r.PathValue("zone"))
	if err != nil {
		s.fail(w, err)
		return
	}
	s.render(w, "zone", v.Summary.Zone, v.To, v.Summary.UTCOffsetHours, v)
}

func (s *Server) alertsPage(w http.ResponseWriter, r *http.Request, rd StatusReader) {
	v, err := rd.Alerts()
	if err != nil {
		s.fail(w, err)
		return
	}
	s.render(w, "alerts", "alerts", v.Generated, 0, v)
}
