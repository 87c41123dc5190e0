package httpapi

import (
	"encoding/json"
	"errors"
	"html/template"
	"net/http"

	"etpulse/gateway/report"
)

// ReportBuilder builds the morning report (*report.Builder).
type ReportBuilder interface {
	Report(site, date string) (report.Report, error)
}

var _ ReportBuilder = (*report.Builder)(nil)

// reportSetup is what SetReport installs.
type reportSetup struct{ b ReportBuilder }

// SetReport enables the morning report's page (ReportPagePath) and JSON
// route (ReportPath), built by b. They need the status pages enabled
// (SetStatus) and their token when one is set. It may be called while the
// server runs.
func (s *Server) SetReport(b ReportBuilder) { s.report.Store(&reportSetup{b: b}) }

// reportRoutes registers the report's page and JSON route on mux.
func (s *Server) reportRoutes(mux *http.ServeMux) {
	guard := func(fn func(w http.ResponseWriter, r *http.Request, b ReportBuilder)) http.HandlerFunc {
		return func(w http.ResponseWriter, r *http.Request) {
			st, rs := s.status.Load(), s.report.Load()
			if st == nil || rs == nil {
				http.Error(w, "the morning report is not enabled on this listener", http.StatusServiceUnavailable)
				return
			}
			if !s.authorized(w, r, st) {
				return
			}
			fn(w, r, rs.b)
		}
	}
	mux.HandleFunc("GET "+ReportPath, guard(func(w http.ResponseWriter, r *http.Request, b ReportBuilder) {
		rep, err := b.Report(r.URL.Query().Get("site"), r.URL.Query().Get("date"))
		if s.reportRefused(w, err) {
			return
		}
		s.writeJSON(w, rep, err)
	}))
	mux.HandleFunc("GET "+ReportPagePath, guard(func(w http.ResponseWriter, r *http.Request, b ReportBuilder) {
		rep, err := b.Report(r.URL.Query().Get("site"), r.URL.Query().Get("date"))
		if s.reportRefused(w, err) {
			return
		}
		if err != nil {
			s.fail(w, err)
			return
		}
		off := 0.0
		if len(rep.Stations) > 0 {
			off = rep.Stations[0].UTCOffsetHours
		}
		s.render(w, "report", "Report "+rep.Date, rep.Generated, off, reportView{Report: rep})
	}))
}

// reportRefused answers 400 with the parameter and the fix for a bad
// request, as JSON ({"param": ..., "problem": ...}) that FetchReport reads.
func (s *Server) reportRefused(w http.ResponseWriter, err error) bool {
	var ie *report.InputError
	if !errors.As(err, &ie) {
		return false
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(http.StatusBadRequest)
	if err := json.NewEncoder(w).Encode(ie); err != nil {
		s.log.Warn("report: writing refusal", "err", err)
	}
	return true
}

// reportView is what the report page renders.
type reportView struct{ report.Report }

// Offset returns the UTC offset of a station of the report.
func (v reportView) Offset(station string) float64 {
	for _, st := range v.Stations {
		if st.Station == station {
			return st.UTCOffsetHours
		}
	}
	return 0
}

const reportHTML = `{{define "body"}}{{with .Data}}
<h1>Morning report: {{.Site}}, {{.Date}}</h1>
<p class="muted">Each station's standard-time day. Also as <a href="/api/v1/report?site={{.Site}}&amp;date={{.Date}}">JSON</a>.</p>
<h2>Stations</h2>
<div class="cards">{{range .Stations}}<div class="card{{if .Alerts}} warn{{end}}"><b>{{.Station}}</b>
{{range .ET}}<div><span class="big">{{printf "%.2f" .MM}}</span> mm {{.Label}} <span class="muted">({{.Hours}} h)</span></div>{{else}}<div class="muted">no reference ET</div>{{end}}
<div>rain {{printf "%.1f" .RainMM}} mm</div>
<div class="muted">hours: {{.HoursComplete}} complete, {{.HoursFilled}} filled, {{.HoursMissing}} missing</div>
{{$off := .UTCOffsetHours}}{{range .Alerts}}<div class="alert">{{local .Time $off}} {{.Kind}} {{.Sensor}}</div><div class="muted">{{.Message}}</div>{{end}}
</div>{{end}}</div>
{{if .Zones}}<h2>Zones</h2>
<div class="scroll"><table><tr><th>zone</th><th>ETc mm</th><th>eff. rain mm</th><th>commanded min</th><th>reported min</th><th>credited mm</th><th>depletion start → end mm</th><th>RAW / TAW mm</th><th>stress h</th></tr>
{{range .Zones}}<tr><td><a href="/zones/{{$.Data.Site}}/{{.Zone}}">{{.Zone}}</a></td><td>{{printf "%.2f" .ETcMM}}</td><td>{{printf "%.2f" .EffRainMM}}</td><td>{{printf "%.0f" .CommandedMin}} ({{.Commands}})</td><td>{{printf "%.1f" .ReportedMin}}</td><td>{{printf "%.2f" .CreditedMM}}</td><td>{{if .DepletionStartMM}}{{num .DepletionStartMM}}{{else}}–{{end}} → {{if .DepletionEndMM}}{{num .DepletionEndMM}}{{else}}–{{end}}</td><td>{{if .RAWMM}}{{num .RAWMM}}{{end}} / {{if .TAWMM}}{{num .TAWMM}}{{end}}</td><td class="{{if .StressHours}}alert{{end}}">{{.StressHours}}</td></tr>{{end}}
</table></div>
<h2>Next planned runs</h2>
<div class="scroll"><table><tr><th>zone</th><th>start</th><th>minutes</th><th>cycle</th><th>state</th></tr>
{{range $z := .Zones}}{{$off := $.Data.Offset $z.Station}}{{range $z.Plan}}<tr><td>{{$z.Zone}}</td><td>{{local .Start $off}}</td><td>{{.Minutes}}</td><td>{{.Cycle}}/{{.Cycles}}</td><td>{{.State}}</td></tr>{{end}}{{end}}
</table></div>{{end}}
{{end}}{{end}}`

func init() {
	t := template.Must(template.New("report").Funcs(pageFuncs).Parse(layoutHTML))
	pages["report"] = template.Must(t.Parse(reportHTML))
}
