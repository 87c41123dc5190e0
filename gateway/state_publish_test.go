package gateway_test

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway"
	"etpulse/gateway/config"
	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// TestRetainedState runs the gateway on the demo farm against mosquitto,
// lets one hour close, and then checks that a subscriber arriving later
// receives the retained state of the station (the record's ET, rounded)
// and of every zone (depletion, RAW, TAW), in compact JSON without long
// fractions.
func TestRetainedState(t *testing.T) {
	url := testenv.MQTT(t)
	prefix := fmt.Sprintf("itstate%d", time.Now().UnixNano())
	sim := demo.New(demo.Options{Seed: 5, TopicRoot: prefix + "-sensors", Stations: []string{demo.Orchard, demo.Paddock},
		DupRate: -1, LateRate: -1, BadRate: -1, ShuffleRate: -1})
	doc := "topic_prefix: " + prefix + "\n" + sim.ConfigYAML(demo.ConfigOptions{StatePath: filepath.Join(t.TempDir(), "s.db"), BrokerURL: url})
	doc = strings.Replace(doc, "  client_id: \"\"\n", "", 1)
	cfg, err := config.Parse([]byte(doc))
	require.NoError(t, err)
	require.NotEmpty(t, cfg.Sites[0].Zones)

	db, err := state.Open(cfg.State.Path)
	require.NoError(t, err)
	t.Cleanup(func() { _ = db.Close() })
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	client, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: cfg.Broker.ClientID, Workers: 1, CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { client.Close(time.Second) })

	clock := demo.NewClock(sim.Start())
	recs := make(chan hourly.Record, 10)
	g, err := gateway.New(cfg, gateway.Deps{DB: db, MQTT: client, Clock: clock,
		OnRecord: func(r hourly.Record) { recs <- r }})
	require.NoError(t, err)
	done := make(chan error, 1)
	go func() { done <- g.Run(ctx) }()
	<-g.Ready()

	msgs := sim.Generate(sim.Start(), sim.Start().Add(70*time.Minute))
	clock.Set(sim.Start().Add(70 * time.Minute))
	publishAll(t, url, prefix+"-pub", msgs)
	var rec hourly.Record // the orchard's first record (the paddock's may come first)
	for rec.Station != demo.Orchard {
		select {
		case rec = <-recs:
		case <-time.After(20 * time.Second):
			t.Fatal("no hourly record of the orchard")
		}
	}
	require.NotNil(t, rec.Result)

	site := cfg.Sites[0].ID
	stTopic := config.StationStateTopic(prefix, site, demo.Orchard)
	repTopic := config.ReportTopic(prefix, site)
	want := map[string]bool{stTopic: true, repTopic: true}
	for _, z := range cfg.Sites[0].Zones {
		want[config.ZoneStateTopic(prefix, site, z.ID)] = true
	}
	got := map[string][]byte{}
	require.Eventually(t, func() bool {
		late, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: prefix + "-late", CleanSession: true})
		if err != nil {
			return false
		}
		defer late.Close(0)
		ch := make(chan mqtt.Message, 64)
		for _, f := range []string{prefix + "/" + site + "/+/state", prefix + "/" + site + "/zones/+/state", repTopic} {
			if late.Subscribe(f, 1, func(m mqtt.Message) { m.Ack(); ch <- m }) != nil {
				return false
			}
		}
		timeout := time.After(time.Second)
		for len(got) < len(want) {
			select {
			case m := <-ch:
				if m.Retained && want[m.Topic] {
					got[m.Topic] = m.Payload
				}
			case <-timeout:
				return false
			}
		}
		// The station's state names the record's reference once the
		// publisher has had its pass after that record (a station with
		// two references gets their records one after the other).
		var partial struct {
			ETmm map[string]float64 `json:"et_mm"`
		}
		if json.Unmarshal(got[stTopic], &partial) != nil {
			return false
		}
		if _, ok := partial.ETmm[string(rec.Reference)]; !ok {
			clear(got)
			return false
		}
		return true
	}, 20*time.Second, 100*time.Millisecond, "retained state for %v", want)

	longFraction := regexp.MustCompile(`\d\.\d{4,}`)
	for tp, b := range got {
		assert.False(t, longFraction.Match(b), "%s: numbers rounded: %s", tp, b)
	}
	var st struct {
		Station   string             `json:"station"`
		HourStart time.Time          `json:"hour_start"`
		ETmm      map[string]float64 `json:"et_mm"`
	}
	require.NoError(t, json.Unmarshal(got[stTopic], &st), "%s", got[stTopic])
	assert.Equal(t, demo.Orchard, st.Station)
	assert.True(t, rec.Start.Equal(st.HourStart))
	// The state holds the hour's latest revision: compare with the latest
	// record of that hour seen so far.
	for more := true; more; {
		select {
		case r := <-recs:
			if r.Station == rec.Station && r.Start.Equal(rec.Start) && r.Reference == rec.Reference && r.Revision >= rec.Revision {
				rec = r
			}
		default:
			more = false
		}
	}
	require.NotNil(t, rec.Result)
	assert.InDelta(t, rec.Result.ET, st.ETmm[string(rec.Reference)], 0.0051, "ET rounded to 0.01 mm")
	var rep struct {
		Site     string `json:"site"`
		Date     string `json:"date"`
		Stations []struct {
			Station string `json:"station"`
		} `json:"stations"`
	}
	require.NoError(t, json.Unmarshal(got[repTopic], &rep), "%s", got[repTopic])
	assert.Equal(t, site, rep.Site)
	off := time.Duration(cfg.Sites[0].Stations[0].UTCOffset * float64(time.Hour))
	assert.Equal(t, clock.Now().Add(off).AddDate(0, 0, -1).UTC().Format(time.DateOnly), rep.Date, "yesterday in the stations' standard time")
	assert.Len(t, rep.Stations, 2)
	for tp := range want {
		if tp == stTopic || tp == repTopic {
			continue
		}
		var z map[string]any
		require.NoError(t, json.Unmarshal(got[tp], &z), "%s", got[tp])
		for _, k := range []string{"depletion_mm", "raw_mm", "taw_mm", "trigger_mm"} {
			v, ok := z[k].(float64)
			assert.True(t, ok && !math.IsNaN(v) && v >= 0, "%s: %s in %s", tp, k, got[tp])
		}
		assert.Contains(t, z, "hold")
		assert.Contains(t, z, "next_run")
	}
	cancel()
	require.NoError(t, <-done)
}
