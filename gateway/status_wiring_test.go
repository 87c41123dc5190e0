package gateway_test

import (
	"context"
	"encoding/json"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/gateway/status"
)

// TestStatusPagesOnGatewayListener: the live gateway serves the status
// pages on http.listen, behind the token of http.token_file, read from
// its own state (the demo farm's three stations and two zones).
func TestStatusPagesOnGatewayListener(t *testing.T) {
	dir := t.TempDir()
	const token = "5d1c0a9e8f7b6a5d4c3b2a1908f7e6d5"
	tokFile := filepath.Join(dir, "http-token")
	require.NoError(t, os.WriteFile(tokFile, []byte(token+"\n"), 0o600))
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	addr := ln.Addr().String()
	require.NoError(t, ln.Close())

	broker, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	defer broker.Close()
	sim := demo.New(demo.Options{Seed: 2})
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: url, ClientID: "status-wiring", StatePath: filepath.Join(dir, "state.db")})
	require.NoError(t, err)
	cfg.HTTP.Listen, cfg.HTTP.TokenFile = addr, tokFile
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	defer db.Close()
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: "status-wiring", CleanSession: true})
	require.NoError(t, err)
	defer client.Close(time.Second)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: demo.NewClock(sim.Start())})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()
	<-g.Ready()

	get := func(bearer string) (*http.Response, error) {
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, "http://"+addr+"/api/v1/overview", nil)
		if bearer != "" {
			req.Header.Set("Authorization", "Bearer "+bearer)
		}
		return http.DefaultClient.Do(req)
	}
	require.Eventually(t, func() bool {
		resp, err := get("")
		if err != nil {
			return false
		}
		resp.Body.Close()
		return true
	}, 30*time.Second, 20*time.Millisecond, "the listener comes up")
	resp, err := get("")
	require.NoError(t, err)
	resp.Body.Close()
	assert.Equal(t, http.StatusUnauthorized, resp.StatusCode)
	resp, err = get(token)
	require.NoError(t, err)
	defer resp.Body.Close()
	require.Equal(t, http.StatusOK, resp.StatusCode)
	var ov status.Overview
	require.NoError(t, json.NewDecoder(resp.Body).Decode(&ov))
	assert.Len(t, ov.Stations, 3)
	assert.Len(t, ov.Zones, 2)
	assert.Equal(t, sim.Start().UTC(), ov.Generated.UTC(), "on the gateway clock")
}

// TestReadToken: the token file must exist and hold a token of 16
// characters or more; the message names the key and the fix.
func TestReadToken(t *testing.T) {
	dir := t.TempDir()
	tok, err := gateway.ReadToken(config.HTTP{})
	require.NoError(t, err)
	assert.Empty(t, tok)
	_, err = gateway.ReadToken(config.HTTP{TokenFile: filepath.Join(dir, "missing")})
	require.ErrorContains(t, err, "http.token_file")
	require.ErrorContains(t, err, "write the access token into it")
	short := filepath.Join(dir, "short")
	require.NoError(t, os.WriteFile(short, []byte("  abc123 \n"), 0o600))
	_, err = gateway.ReadToken(config.HTTP{TokenFile: short})
	require.ErrorContains(t, err, "holds 6 characters, need at least 16")
	good := filepath.Join(dir, "good")
	require.NoError(t, os.WriteFile(good, []byte("0123456789abcdef0123\n"), 0o600))
	tok, err = gateway.ReadToken(config.HTTP{TokenFile: good})
	require.NoError(t, err)
	assert.Equal(t, "0123456789abcdef0123", tok)
}
