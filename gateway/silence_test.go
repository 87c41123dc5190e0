package gateway_test

import (
	"context"
	"fmt"
	"path/filepath"
	"slices"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway"
	"etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// A station that goes quiet still gets its hour: the intake loop sleeps until
// the silence deadline on the gateway's clock and closes the hour, flagged.
func TestSilentStationHourClosedByClock(t *testing.T) {
	url := testenv.MQTT(t)
	root := fmt.Sprintf("itsilent%d", time.Now().UnixNano())
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	sim, cfg, db, client := silentStation(ctx, t, url, root)

	clock := demo.NewClock(sim.Start())
	recs := make(chan hourly.Record, 10)
	cfg.TopicPrefix, cfg.Alerts.TopicPrefix = root+"/out", root+"/out"
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client,
		Clock: clock, OnRecord: func(r hourly.Record) { recs <- r }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	<-g.Ready()

	// 40 minutes of readings, then nothing.
	msgs := sim.Generate(sim.Start(), sim.Start().Add(40*time.Minute))
	publishAll(t, url, root+"-pub", msgs)
	require.Eventually(t, func() bool { return g.Handled() == uint64(len(msgs)) }, 20*time.Second, 5*time.Millisecond)
	clock.Set(sim.Start().Add(time.Hour + 19*time.Minute)) // silence_close is 20m in the demo config
	select {
	case r := <-recs:
		t.Fatalf("hour closed before its silence deadline: %s", r.LocalStart)
	case <-time.After(300 * time.Millisecond):
	}
	clock.Set(sim.Start().Add(time.Hour + 20*time.Minute))
	select {
	case r := <-recs:
		assert.Equal(t, sim.Start(), r.Start)
		assert.True(t, slices.Contains(r.Flags, pipeline.FlagSilenceClose), "flags %v", r.Flags)
		assert.False(t, r.Complete, "40 of 60 minutes is below the 0.75 coverage")
		assert.Nil(t, r.Result)
	case <-time.After(10 * time.Second):
		t.Fatal("no record after the silence deadline")
	}
	cancel()
	require.NoError(t, <-done)
}

// silentStation is the demo farm's paddock station alone, without duplicate,
// late, malformed or shuffled readings, configured for the broker at url
// under topic root, with its state file and the gateway's connection.
func silentStation(ctx context.Context, t *testing.T, url, root string) (*demo.Sim, *config.Config, *bbolt.DB, *mqtt.Client) {
	t.Helper()
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: root, Stations: []string{demo.Paddock}, DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(t.TempDir(), "s.db")})
	require.NoError(t, err)
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-gw", Workers: 1})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })
	return sim, cfg, db, client
}

// A gateway run by RunStepped waits on no clock: a quiet station's hour is
// closed by the Step at its silence deadline, not before, and its record is
// published by the time Step returns. Embedded broker, no servers needed.
func TestSteppedGatewayClosesSilentHourAtStep(t *testing.T) {
	srv, url, err := demo.StartBroker(true)
	require.NoError(t, err)
	t.Cleanup(func() { _ = srv.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	sim, cfg, db, client := silentStation(ctx, t, url, "stepped")

	clk := clock.NewManual(sim.Start())
	var recs []hourly.Record // appended by Step's publish, read after Step returns
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clk,
		OnRecord: func(r hourly.Record) { recs = append(recs, r) }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.RunStepped(ctx) }()
	select {
	case <-g.Ready():
	case err := <-done:
		t.Fatalf("gateway stopped: %v", err)
	}

	// 40 minutes of readings, then nothing.
	msgs := sim.Generate(sim.Start(), sim.Start().Add(40*time.Minute))
	for _, m := range msgs {
		require.NoError(t, srv.Publish(m.Topic, m.Payload, false, 1))
	}
	for {
		progress := g.Progress()
		if g.Handled() >= uint64(len(msgs)) {
			break
		}
		select {
		case <-progress:
		case err := <-done:
			t.Fatalf("gateway stopped: %v", err)
		case <-ctx.Done():
			t.Fatalf("handled %d of %d messages", g.Handled(), len(msgs))
		}
	}

	// silence_close is 20m in the demo configuration.
	clk.Set(sim.Start().Add(time.Hour + 19*time.Minute))
	require.NoError(t, g.Step(ctx, clk.Now()))
	assert.Empty(t, recs, "hour closed before its silence deadline")

	clk.Set(sim.Start().Add(time.Hour + 20*time.Minute))
	require.NoError(t, g.Step(ctx, clk.Now()))
	require.Len(t, recs, 1, "the Step at the silence deadline closes and publishes the hour")
	r := recs[0]
	assert.Equal(t, sim.Start(), r.Start)
	assert.True(t, slices.Contains(r.Flags, pipeline.FlagSilenceClose), "flags %v", r.Flags)
	assert.False(t, r.Complete, "40 of 60 minutes is below the 0.75 coverage")

	cancel()
	require.NoError(t, <-done)
}
