package httpapi

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"strconv"
	"strings"
	"time"
)

// ErrNoGateway means no gateway serving the history answered at the
// address: nothing listens there, or what listens does not know
// HistoryPath. A caller may then read the state file itself.
var ErrNoGateway = errors.New("no gateway answers")

// BaseURL returns the URL under which a client on the same machine reaches
// a server listening on listen (the configuration's http.listen): an
// unspecified host (":9470", "0.0.0.0:9470", "[::]:9470") becomes loopback.
func BaseURL(listen string) (string, error) {
	host, port, err := net.SplitHostPort(listen)
	if err != nil {
		return "", fmt.Errorf("http.listen %q: %w", listen, err)
	}
	switch host {
	case "", "0.0.0.0":
		host = "127.0.0.1"
	case "::":
		host = "::1"
	}
	return "http://" + net.JoinHostPort(host, port), nil
}

// historyClient connects quickly or not at all (a gateway on this machine
// answers at once) and then waits as long as the export streams.
var historyClient = &http.Client{Transport: &http.Transport{
	Proxy:                 nil, // loopback: never through a proxy
	DialContext:           (&net.Dialer{Timeout: 3 * time.Second}).DialContext,
	ResponseHeaderTimeout: 30 * time.Second,
}}

// FetchHistory asks the gateway at base (see BaseURL) for the history q
// selects and copies the response to w as it arrives; it returns the number
// of points the gateway reports in its trailer. token, when not empty, is
// sent as a Bearer token (the gateway's http.token_file). Errors wrapping
// ErrNoGateway come before anything was written to w.
func FetchHistory(ctx context.Context, base string, q HistoryQuery, token string, w io.Writer) (int, error) {
	u := base + HistoryPath + "?" + q.Values().Encode()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, u, nil)
	if err != nil {
		return 0, fmt.Errorf("fetch history %s: %w", base, err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := historyClient.Do(req)
	if err != nil {
		if ctx.Err() != nil {
			return 0, fmt.Errorf("fetch history %s: %w", base, ctx.Err())
		}
		return 0, fmt.Errorf("fetch history %s: %w (%w)", base, ErrNoGateway, err)
	}
	defer resp.Body.Close()
	switch resp.StatusCode {
	case http.StatusOK:
	case http.StatusNotFound:
		return 0, fmt.Errorf("fetch history %s: %w (it has no %s route: an older etpulse, or another server)", base, ErrNoGateway, HistoryPath)
	case http.StatusUnauthorized:
		return 0, fmt.Errorf("fetch history %s: the gateway wants its access token: give the configuration whose http.token_file it uses", base)
	default:
		body, _ := io.ReadAll(io.LimitReader(resp.Body, 4096))
		return 0, fmt.Errorf("fetch history %s: %s: %s", base, resp.Status, strings.TrimSpace(string(body)))
	}
	if _, err := io.Copy(w, resp.Body); err != nil {
		return 0, fmt.Errorf("fetch history %s: %w", base, err)
	}
	if msg := resp.Trailer.Get(TrailerError); msg != "" {
		return 0, fmt.Errorf("fetch history %s: the gateway broke off the export: %s", base, msg)
	}
	n, err := strconv.Atoi(resp.Trailer.Get(TrailerPoints))
	if err != nil {
		return 0, fmt.Errorf("fetch history %s: the export ended without its %s trailer: output incomplete", base, TrailerPoints)
	}
	return n, nil
}
