package faults_test

import (
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
	"go.etcd.io/bbolt"

	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

const (
	sigTERM = syscall.SIGTERM
	sigKILL = syscall.SIGKILL
)

// zoneOut is what a run leaves in a zone: its balance and its ledger.
type zoneOut struct {
	depletion float64
	commands  []string // "minutes/cycle/cycles" of each command, sorted
	credits   int      // credited commands
	creditMM  float64
	capMM     float64 // the commanded water: minutes x rate, summed
}

// runOut is what one run of the script leaves behind.
type runOut struct {
	final     map[string]hourly.Record
	conflicts int
	zones     map[string]zoneOut
	kills     int
}

// readZones reads the zone balances and the command ledger from a stopped
// gateway's state file, read-only.
func readZones(t *testing.T, path string) map[string]zoneOut {
	t.Helper()
	db, err := state.OpenReadOnly(path)
	require.NoError(t, err)
	defer db.Close()
	out := map[string]zoneOut{}
	require.NoError(t, db.View(func(tx *bbolt.Tx) error {
		zb := tx.Bucket(state.BucketZones)
		if zb == nil {
			return fmt.Errorf("state file %s has no zones bucket", path)
		}
		if err := zb.Bucket(state.BucketZoneState).ForEach(func(k, v []byte) error {
			var b state.ZoneBalance
			if err := json.Unmarshal(v, &b); err != nil {
				return fmt.Errorf("zone %s: %w", k, err)
			}
			z := out[string(k)]
			z.depletion = b.DepletionMM
			out[string(k)] = z
			return nil
		}); err != nil {
			return err
		}
		return zb.Bucket(state.BucketLedger).ForEach(func(k, v []byte) error {
			var e state.LedgerEntry
			if err := json.Unmarshal(v, &e); err != nil {
				return fmt.Errorf("ledger %s: %w", k, err)
			}
			key := strings.SplitN(string(k), "/", 2)[0] + "/" + e.Zone
			z := out[key]
			z.commands = append(z.commands, fmt.Sprintf("%dmin/%d/%d", e.Plan.Minutes, e.Plan.Cycle, e.Plan.Cycles))
			sort.Strings(z.commands)
			z.capMM += float64(e.Plan.Minutes) * e.Plan.RateMMH / 60
			if e.Run.Credited {
				z.credits++
				z.creditMM += e.Run.CreditMM
			}
			out[key] = z
			return nil
		})
	}))
	return out
}

// awaitCredits waits until every zone's command has been credited, as the
// running gateway's history tells, or the limit passes. Between polls it
// calls between (e.g. to kill and restart the gateway).
func awaitCredits(t *testing.T, sc *script, g *gw, zones int, limit time.Duration, between func()) bool {
	t.Helper()
	deadline := time.Now().Add(limit)
	for time.Now().Before(deadline) {
		rows, err := g.export(sc, true, "valve_report")
		if err == nil {
			credited := map[string]bool{}
			for _, r := range rows {
				if r["credited"] == "true" {
					credited[r["zone"]] = true
				}
			}
			if len(credited) >= zones {
				return true
			}
		}
		if between != nil {
			between()
		}
		time.Sleep(250 * time.Millisecond)
	}
	return false
}

// runScript runs the script through a gateway on a private broker with the
// simulated controllers; kill, when set, is called with the gateway after
// each chunk of the stream and between the polls for the credits.
func runScript(t *testing.T, s *suite, sc *script, name string, kills int, pick func() time.Duration) runOut {
	b := testenv.NewMosquitto(t, false)
	rl := watchRecords(t, b.URL)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL, clientID: "faults-" + name})
	startController(t, b.URL, g.cfgPath)
	pub := newPublisher(t, b.URL, "faults-pub-"+name)
	g.start()
	var out runOut
	killAt := func() {
		time.Sleep(pick()) // a random point: the fault, not a synchronisation
		g.signal(sigKILL)
		out.kills++
		g.start()
	}
	parts := chunks(sc.msgs, max(1, kills-2))
	for i, part := range parts {
		pub.publish(t, part)
		if kills > 0 && i < len(parts)-1 {
			killAt()
		}
	}
	require.Equal(t, sc.hours(), rl.await(sc.hours(), time.Second, 90*time.Second), "%s: hours published", name)
	late := 0
	ok := awaitCredits(t, sc, g, 2, 150*time.Second, func() {
		if out.kills < kills && late < 2 {
			late++
			killAt()
		}
	})
	require.True(t, ok, "%s: both zones' runs credited within 150 s:\n%s", name, tail(g.log()))
	for out.kills < kills {
		killAt()
	}
	// Let the last start settle what it redelivers before the clean stop.
	rl.await(sc.hours(), time.Second, 10*time.Second)
	require.Equal(t, 0, g.signal(sigTERM), "%s: clean stop exits 0:\n%s", name, tail(g.log()))
	out.final, out.conflicts = rl.snapshot()
	out.zones = readZones(t, g.state)
	return out
}

// faultSIGKILL kills the gateway with SIGKILL at 20+ random points of the
// scripted stream and of the valve runs, and compares records, zone
// balances and the ledger with an undisturbed run of the same script.
func faultSIGKILL(t *testing.T, s *suite) result {
	sc := newScript()
	const kills = 22
	var a, b runOut
	t.Run("runs", func(t *testing.T) {
		t.Run("undisturbed", func(t *testing.T) {
			t.Parallel()
			a = runScript(t, s, sc, "a", 0, nil)
		})
		t.Run("killed", func(t *testing.T) {
			t.Parallel()
			b = runScript(t, s, sc, "b", kills, func() time.Duration {
				return time.Duration(s.rng.IntN(400)) * time.Millisecond
			})
		})
	})
	require.False(t, t.Failed(), "a run failed")
	s.mu.Lock()
	s.ref = a.final
	s.mu.Unlock()
	lost, phantom, detail := compareRecords(a.final, b.final)
	dup := b.conflicts + a.conflicts
	require.Len(t, a.zones, 2, "two zones in the undisturbed run")
	for k, za := range a.zones {
		zb := b.zones[k]
		if strings.Join(za.commands, ",") != strings.Join(zb.commands, ",") {
			lost++
			detail = append(detail, fmt.Sprintf("%s commands %v, undisturbed %v", k, zb.commands, za.commands))
		}
		if zb.credits > za.credits {
			dup += zb.credits - za.credits
			detail = append(detail, fmt.Sprintf("%s credited %d times, undisturbed %d", k, zb.credits, za.credits))
		} else if zb.credits < za.credits {
			lost += za.credits - zb.credits
			detail = append(detail, fmt.Sprintf("%s credited %d times, undisturbed %d", k, zb.credits, za.credits))
		}
		// The balance adds the same steps in another order after a kill:
		// equal to rounding (1e-9 mm).
		if math.Abs(za.depletion-zb.depletion) > 1e-9 || math.Abs(za.creditMM-zb.creditMM) > 1e-9 {
			lost++
			detail = append(detail, fmt.Sprintf("%s depletion %.6f credit %.6f, undisturbed %.6f %.6f", k, zb.depletion, zb.creditMM, za.depletion, za.creditMM))
		}
	}
	lost += phantom
	zs := []string{}
	for k, z := range a.zones {
		zs = append(zs, fmt.Sprintf("%s=%.3fmm/%dcredit", strings.SplitN(k, "/", 2)[1], z.depletion, z.credits))
	}
	sort.Strings(zs)
	d := fmt.Sprintf("seed=%d hours=%d zones=[%s]", s.seed, len(a.final), strings.Join(zs, " "))
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "sigkill", trials: b.kills, lost: lost, duplicated: dup, detail: d}
}

// faultBrokerRestart stops and restarts a persistent mosquitto three times
// while the stream flows: the gateway's and the watcher's sessions and the
// messages queued for them survive, so every hour comes out as undisturbed.
func faultBrokerRestart(t *testing.T, s *suite) result {
	sc := newScript()
	ref := s.reference(t, sc)
	b := testenv.NewMosquitto(t, true)
	rl := watchRecords(t, b.URL)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL})
	g.start()
	const restarts = 3
	parts := chunks(sc.msgs, restarts+1)
	for i, part := range parts {
		pub := newPublisher(t, b.URL, fmt.Sprintf("faults-pub-%d", i))
		pub.publish(t, part)
		pub.c.Disconnect(100)
		if i < restarts {
			b.Stop()
			b.Start()
		}
	}
	rl.await(sc.hours(), 2*time.Second, 90*time.Second)
	require.False(t, g.exited(), "the gateway exited during broker restarts:\n%s", tail(g.log()))
	require.Equal(t, 0, g.signal(sigTERM))
	got, conflicts := rl.snapshot()
	lost, phantom, detail := compareRecords(ref, got)
	d := fmt.Sprintf("hours=%d", len(got))
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "broker-restart", trials: restarts, lost: lost + phantom, duplicated: conflicts, detail: d}
}
