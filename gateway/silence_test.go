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

	"etpulse/gateway"
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
	sim := demo.New(demo.Options{Seed: 4, TopicRoot: root, Stations: []string{demo.Paddock}, DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	dir := t.TempDir()
	cfg, err := sim.Config(demo.ConfigOptions{BrokerURL: url, ClientID: root + "-gw", StatePath: filepath.Join(dir, "s.db")})
	require.NoError(t, err)
	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: root + "-gw", Workers: 1})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	clock := demo.NewClock(sim.Start())
	recs := make(chan hourly.Record, 10)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, TopicPrefix: root + "/out",
		Clock: clock.Now, After: clock.After, OnRecord: func(r hourly.Record) { recs <- r }})
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
