package zones

import (
	"context"
	"encoding/json"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/store"
)

// zoneSteps returns the zone_step points of the fixture's local history.
func (f *fixture) zoneSteps(t *testing.T) []store.Point {
	t.Helper()
	var pts []store.Point
	require.NoError(t, f.out.History().Range(store.Filter{Measurements: []string{store.MeasurementZone}}, func(p store.Point) error {
		pts = append(pts, p)
		return nil
	}))
	return pts
}

func (f *fixture) water(t *testing.T, payload string) WaterReply {
	t.Helper()
	return f.svc.applyWater(f.svc.sites[0], []byte(payload), f.clock.Now())
}

// The Fernhill zones (testConfig): 1000 m2 drip at 6 mm/h, efficiency 0.9,
// TAW 130 mm. Net depths as a command's credit: minutes/60 x rate x
// efficiency, litres / area x efficiency; the depletion falls by the net
// depth (FAO-56 eq. 85).
func TestApplyWaterStoresStepWithWhoAndWhy(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	f.hour(t, record(time.Date(2026, 7, 1, 9, 0, 0, 0, fernLoc), 0.5, 0)) // 30.5 mm everywhere

	// 60 minutes: 60/60 x 6 x 0.9 = 5.4 mm net; 30.5 - 5.4 = 25.1.
	r := f.water(t, `{"id":"w1","zone":"row-a","kind":"applied","minutes":60,"who":"Ana","why":"flushed the lateral by hand","time":"2026-07-01T09:50:00-08:00"}`)
	require.True(t, r.OK, r.Error)
	assert.Equal(t, "w1", r.ID)
	assert.InDelta(t, 5.4, *r.NetMM, 1e-12)
	assert.InDelta(t, 30.5, *r.PreviousMM, 1e-12)
	assert.InDelta(t, 25.1, *r.DepletionMM, 1e-9)
	assert.InDelta(t, 25.1, f.status(t, "row-a").State.Depletion, 1e-9)
	assert.InDelta(t, 25.1, testutil.ToFloat64(f.svc.m.depletion.WithLabelValues("fernhill", "row-a")), 1e-9)

	// 10000 L on 1000 m2: 10 mm gross x 0.9 = 9 mm net; 30.5 - 9 = 21.5.
	r = f.water(t, `{"id":"w2","zone":"row-b","kind":"frost_protection","volume_l":10000,"who":"night crew","why":"frost -2 C forecast"}`)
	require.True(t, r.OK, r.Error)
	assert.InDelta(t, 21.5, f.status(t, "row-b").State.Depletion, 1e-9)

	// A hand measurement sets the depletion.
	r = f.water(t, `{"id":"w3","zone":"row-c","kind":"depletion_reset","depletion_mm":12,"who":"Ben","why":"probe reading at 30 cm"}`)
	require.True(t, r.OK, r.Error)
	assert.InDelta(t, 12, f.status(t, "row-c").State.Depletion, 1e-12)
	assert.Zero(t, *r.NetMM)

	pts := f.zoneSteps(t)
	require.Len(t, pts, 6, "3 hour steps and 3 manual steps")
	byKind := map[string]store.Point{}
	for _, p := range pts {
		byKind[p.Notes["kind"]] = p
	}
	m := byKind[string(controllers.StepManual)]
	assert.Equal(t, "row-a", m.Tags["zone"])
	assert.Equal(t, "Ana", m.Notes["who"])
	assert.Equal(t, "flushed the lateral by hand", m.Notes["why"])
	assert.Equal(t, "w1", m.Notes["request"])
	assert.Equal(t, "2026-07-01T17:50:00Z", m.Notes["applied_at"])
	assert.NotContains(t, m.Notes, "command")
	assert.InDelta(t, 5.4, m.Fields["irrigation_mm"], 1e-12)
	assert.InDelta(t, 25.1, m.Fields["depletion_mm"], 1e-9)
	assert.InDelta(t, 30.5, m.Fields["previous_depletion_mm"], 1e-12)
	assert.True(t, m.Time.Equal(start), "stored at the time the balance changed")
	assert.Equal(t, "night crew", byKind[string(controllers.StepFrost)].Notes["who"])
	reset := byKind[string(controllers.StepReset)]
	assert.Equal(t, "probe reading at 30 cm", reset.Notes["why"])
	assert.InDelta(t, 30.5, reset.Fields["previous_depletion_mm"], 1e-12)
	assert.InDelta(t, 12, reset.Fields["depletion_mm"], 1e-12)

	ev := f.eventsOf(EventWater)
	require.Len(t, ev, 3)
	assert.Equal(t, "applied by Ana: flushed the lateral by hand", ev[0].Text)
	assert.Equal(t, controllers.StepManual, ev[0].Step.Kind)
}

// Refused requests are answered with the problem and the likely fix and
// change nothing: no balance change, no point.
func TestApplyWaterRefusals(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	for _, tc := range []struct{ name, payload, want string }{
		{"unknown zone", `{"id":"r1","zone":"row-z","kind":"applied","mm":3,"who":"a","why":"b"}`, `zone: no zone "row-z" in site fernhill`},
		{"above TAW", `{"id":"r2","zone":"row-a","kind":"applied","mm":140,"who":"a","why":"b"}`, "140.0 mm net is more than 130.0 mm (TAW 130.0 mm); check the unit"},
		{"negative", `{"id":"r3","zone":"row-a","kind":"applied","minutes":-5,"who":"a","why":"b"}`, "minutes: must be > 0, got -5"},
		{"reset above TAW", `{"id":"r4","zone":"row-a","kind":"depletion_reset","depletion_mm":200,"who":"a","why":"b"}`, "depletion_mm: must be within 0-130.0 mm"},
		{"future", `{"id":"r5","zone":"row-a","kind":"applied","mm":3,"who":"a","why":"b","time":"2026-07-01T11:00:00-08:00"}`, "is in the future"},
		{"too old", `{"id":"r6","zone":"row-a","kind":"applied","mm":3,"who":"a","why":"b","time":"2026-06-27T11:00:00-08:00"}`, "more than 72 h ago"},
		{"unknown key", `{"id":"r7","zone":"row-a","kind":"applied","mm":3,"who":"a","why":"b","inches":1}`, `unknown field "inches"`},
		{"no who", `{"id":"r8","zone":"row-a","kind":"applied","mm":3,"who":" ","why":"b"}`, "who: required"},
		{"two amounts", `{"id":"r9","zone":"row-a","kind":"applied","mm":3,"minutes":4,"who":"a","why":"b"}`, "exactly one of mm (net), minutes or volume_l"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			r := f.water(t, tc.payload)
			assert.False(t, r.OK)
			assert.Contains(t, r.Error, tc.want)
			assert.Nil(t, r.DepletionMM)
		})
	}
	assert.Empty(t, f.zoneSteps(t), "nothing stored")
	assert.InDelta(t, 30, f.status(t, "row-a").State.Depletion, 1e-12, "initial depletion untouched")
	assert.Empty(t, f.eventsOf(EventWater))
}

// A reset measured before a command was credited, or while a command runs,
// would erase or double that water: refused.
func TestApplyWaterResetAfterCredit(t *testing.T) {
	now := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, now)
	require.NoError(t, f.db.Update(func(tx *bbolt.Tx) error {
		b, err := openBuckets(tx)
		if err != nil {
			return err
		}
		if err := putCommand(b, "fernhill", &controllers.Command{ID: "row-a-1", Zone: "row-a",
			State: controllers.Finished, Credited: true, EndedAt: now.Add(-10 * time.Minute)}); err != nil {
			return err
		}
		return putCommand(b, "fernhill", &controllers.Command{ID: "row-b-1", Zone: "row-b", State: controllers.Started})
	}))
	r := f.water(t, `{"id":"x1","zone":"row-a","kind":"depletion_reset","depletion_mm":10,"who":"a","why":"b","time":"2026-07-01T10:00:00-08:00"}`)
	assert.False(t, r.OK)
	assert.Contains(t, r.Error, "command row-a-1 was credited at 2026-07-01T18:10:00Z, after the measurement at 2026-07-01T18:00:00Z; measure again")
	r = f.water(t, `{"id":"x2","zone":"row-b","kind":"depletion_reset","depletion_mm":10,"who":"a","why":"b"}`)
	assert.False(t, r.OK)
	assert.Contains(t, r.Error, "command row-b-1 is running")
	assert.Empty(t, f.zoneSteps(t))

	// Measured after the credit: accepted.
	r = f.water(t, `{"id":"x3","zone":"row-a","kind":"depletion_reset","depletion_mm":10,"who":"a","why":"b","time":"2026-07-01T10:15:00-08:00"}`)
	require.True(t, r.OK, r.Error)
	assert.InDelta(t, 10, f.status(t, "row-a").State.Depletion, 1e-12)
}

// TestWaterOverMosquitto sends water requests through the real broker to a
// running zone service: an accepted one changes the depletion, is answered
// OK and stored; a refused one is answered with the problem and stores
// nothing.
func TestWaterOverMosquitto(t *testing.T) {
	url := testenv.MQTT(t)
	now := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), dial(t, url, uniq("water-gw")), now)
	prefix := uniq("water")
	f.svc.o.TopicPrefix = prefix
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- f.svc.Run(ctx) }()
	defer func() {
		cancel()
		require.NoError(t, <-done)
	}()

	cl := dial(t, url, uniq("water-cli"))
	replies := make(chan WaterReply, 4)
	require.NoError(t, cl.Subscribe(config.WaterReplyTopic(prefix, "fernhill"), 1, func(m mqtt.Message) {
		var r WaterReply
		if json.Unmarshal(m.Payload, &r) == nil {
			replies <- r
		}
		m.Ack()
	}))
	ask := func(payload string) WaterReply {
		t.Helper()
		// The service subscribes when Run starts: repeat until answered.
		for range 50 {
			pctx, pcancel := context.WithTimeout(context.Background(), 5*time.Second)
			require.NoError(t, cl.Publish(pctx, config.WaterTopic(prefix, "fernhill"), 1, false, []byte(payload)))
			pcancel()
			select {
			case r := <-replies:
				return r
			case <-time.After(200 * time.Millisecond):
			}
		}
		t.Fatal("no water reply")
		return WaterReply{}
	}

	// Refused first, so a retried publish cannot apply water twice: 5 in
	// as mm would pass; 900 mm is refused.
	r := ask(`{"id":"m1","zone":"row-a","kind":"applied","mm":900,"who":"Ana","why":"typed inches x 180"}`)
	assert.False(t, r.OK)
	assert.Equal(t, "m1", r.ID)
	assert.Contains(t, r.Error, "900.0 mm net is more than 130.0 mm")
	assert.Empty(t, f.zoneSteps(t))

	// 30 (initial) - 12 = 18.
	r = ask(`{"id":"m2","zone":"row-a","kind":"applied","mm":12,"who":"Ana","why":"hand run after the pump repair"}`)
	require.True(t, r.OK, r.Error)
	assert.Equal(t, "m2", r.ID)
	assert.InDelta(t, 18, *r.DepletionMM, 1e-12)
	assert.InDelta(t, 18, f.status(t, "row-a").State.Depletion, 1e-12)
	pts := f.zoneSteps(t)
	require.Len(t, pts, 1)
	assert.Equal(t, "hand run after the pump repair", pts[0].Notes["why"])
	assert.Equal(t, "manual", pts[0].Notes["kind"])
}

// The water request shown in README.md decodes as documented.
func TestReadmeWaterExample(t *testing.T) {
	text, err := os.ReadFile("../../README.md")
	require.NoError(t, err)
	i := strings.Index(string(text), "`<prefix>/<site>/water` (QoS 1):\n\n```json\n")
	require.GreaterOrEqual(t, i, 0, "README shows a water request")
	block := string(text[i:])
	block = block[strings.Index(block, "{"):strings.Index(block, "\n```\n")]
	r, err := DecodeWaterRequest([]byte(block))
	require.NoError(t, err, block)
	assert.Equal(t, "applied", r.Kind)
	w := r.Manual()
	assert.Equal(t, controllers.UnitMinutes, w.Unit)
	assert.InDelta(t, 45, w.Amount, 0)
	assert.False(t, w.At.IsZero())
}

// A request delivered twice (a broker redelivery after a crash before the
// acknowledgement, or a retry) is applied once; a refused one leaves its id
// free for the corrected request. A request without id is refused.
func TestApplyWaterOncePerID(t *testing.T) {
	start := time.Date(2026, 7, 1, 10, 20, 0, 0, fernLoc)
	f := newFixture(t, testConfig(t), nil, start)
	req := `{"id":"d1","zone":"row-a","kind":"applied","mm":4,"who":"Ana","why":"hand run"}`
	r := f.water(t, req)
	require.True(t, r.OK, r.Error)
	assert.False(t, r.Duplicate)
	r = f.water(t, req)
	require.True(t, r.OK, r.Error)
	assert.True(t, r.Duplicate)
	assert.Nil(t, r.DepletionMM)
	assert.InDelta(t, 26, f.status(t, "row-a").State.Depletion, 1e-12, "30 - 4, once")
	assert.Len(t, f.zoneSteps(t), 1)

	r = f.water(t, `{"id":"d2","zone":"row-a","kind":"applied","mm":400,"who":"Ana","why":"typo"}`)
	require.False(t, r.OK)
	r = f.water(t, `{"id":"d2","zone":"row-a","kind":"applied","mm":4,"who":"Ana","why":"corrected"}`)
	require.True(t, r.OK, r.Error)
	assert.False(t, r.Duplicate)
	assert.InDelta(t, 22, f.status(t, "row-a").State.Depletion, 1e-12)

	// The same id in another zone is another request.
	r = f.water(t, `{"id":"d1","zone":"row-b","kind":"applied","mm":4,"who":"Ana","why":"hand run"}`)
	require.True(t, r.OK, r.Error)
	assert.False(t, r.Duplicate)

	r = f.water(t, `{"zone":"row-a","kind":"applied","mm":4,"who":"Ana","why":"hand run"}`)
	assert.False(t, r.OK)
	assert.Contains(t, r.Error, "id: required")
}
