package httpapi

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"strings"

	"etpulse/gateway/report"
)

// ReportPath is the route of the morning report's JSON form
// (?date=YYYY-MM-DD&site=ID, both optional).
const ReportPath = "/api/v1/report"

// ReportPagePath is the route of the morning report's page.
const ReportPagePath = "/report"

// FetchReport asks the gateway at base (see BaseURL) for the report of
// site and date ("" for the only site and for yesterday). token, when not
// empty, is sent as a Bearer token. Errors wrapping ErrNoGateway mean no
// gateway with the route answered; a refused request (bad site or date)
// comes back as *report.InputError.
func FetchReport(ctx context.Context, base, site, date, token string) (report.Report, error) {
	var rep report.Report
	q := url.Values{}
	if site != "" {
		q.Set("site", site)
	}
	if date != "" {
		q.Set("date", date)
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, base+ReportPath+"?"+q.Encode(), nil)
	if err != nil {
		return rep, fmt.Errorf("fetch report %s: %w", base, err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := historyClient.Do(req)
	if err != nil {
		if ctx.Err() != nil {
			return rep, fmt.Errorf("fetch report %s: %w", base, ctx.Err())
		}
		return rep, fmt.Errorf("fetch report %s: %w (%w)", base, ErrNoGateway, err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(io.LimitReader(resp.Body, 8<<20))
	if err != nil {
		return rep, fmt.Errorf("fetch report %s: %w", base, err)
	}
	switch resp.StatusCode {
	case http.StatusOK:
	case http.StatusNotFound:
		return rep, fmt.Errorf("fetch report %s: %w (it has no %s route: an older etpulse, or another server)", base, ErrNoGateway, ReportPath)
	case http.StatusBadRequest:
		var ie report.InputError
		if json.Unmarshal(body, &ie) == nil && ie.Param != "" {
			return rep, &ie
		}
		fallthrough
	default:
		return rep, fmt.Errorf("fetch report %s: %s: %s", base, resp.Status, strings.TrimSpace(string(body)))
	}
	if err := json.Unmarshal(body, &rep); err != nil {
		return rep, fmt.Errorf("fetch report %s: decode: %w", base, err)
	}
	if rep.Version != report.Version {
		return rep, fmt.Errorf("fetch report %s: report version %d, this etpulse reads version %d", base, rep.Version, report.Version)
	}
	return rep, nil
}
