package faults_test

import (
	"context"
	"fmt"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/zones"
)

// topicLog collects the messages of a topic filter.
type topicLog struct {
	mu   sync.Mutex
	msgs [][2]string
}

func watchTopics(t *testing.T, url, filter string) *topicLog {
	t.Helper()
	l := &topicLog{}
	c, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: "faults-topics", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { c.Close(time.Second) })
	require.NoError(t, c.Subscribe(filter, 1, func(m mqtt.Message) {
		l.mu.Lock()
		l.msgs = append(l.msgs, [2]string{m.Topic, string(m.Payload)})
		l.mu.Unlock()
		m.Ack()
	}))
	return l
}

// await waits until a message matches, or the limit passes.
func (l *topicLog) await(match func(topic, payload string) bool, limit time.Duration) bool {
	deadline := time.Now().Add(limit)
	for time.Now().Before(deadline) {
		l.mu.Lock()
		for _, m := range l.msgs {
			if match(m[0], m[1]) {
				l.mu.Unlock()
				return true
			}
		}
		l.mu.Unlock()
		time.Sleep(50 * time.Millisecond)
	}
	return false
}

// faultForgedReports answers every command twice: first a forger (another
// client on the configured report topic) sends a "finished" report with an
// absurd volume and 1440 minutes before the command's start, then the real
// controller reports at the start. The forged report must not be credited
// (it comes before the start), no zone may be credited beyond its command's
// water, and the real report must still be credited.
func faultForgedReports(t *testing.T, s *suite) result {
	sc := newScript()
	b := testenv.NewMosquitto(t, false)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL})
	cfg, err := config.Load(g.cfgPath)
	require.NoError(t, err)
	forger, err := mqtt.Dial(context.Background(), mqtt.Options{URL: b.URL, ClientID: "faults-forger", CleanSession: true})
	require.NoError(t, err)
	t.Cleanup(func() { forger.Close(time.Second) })
	forged := 0
	var fmu sync.Mutex
	for _, site := range cfg.Sites {
		for i := range site.Zones {
			report := site.Zones[i].ReportTopicIn(cfg.Prefix(), site.ID)
			require.NoError(t, forger.Subscribe(site.Zones[i].CommandTopicIn(cfg.Prefix(), site.ID), 1, func(m mqtt.Message) {
				defer m.Ack()
				msg, err := zones.DecodeValveMessage(m.Payload)
				if err != nil || msg.Run == nil {
					return
				}
				payload := fmt.Sprintf(`{"id":%q,"state":"finished","minutes_run":1440,"volume_l":1e15}`, msg.Run.ID)
				ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
				defer cancel()
				if err := forger.Publish(ctx, report, 1, false, []byte(payload)); err == nil {
					fmu.Lock()
					forged++
					fmu.Unlock()
				}
			}))
		}
	}
	// The forger subscribed first: its report arrives before the controller's "accepted".
	startController(t, b.URL, g.cfgPath)
	g.start()
	newPublisher(t, b.URL, "faults-pub").publish(t, sc.msgs)
	credited := awaitCredits(t, sc, g, 2, 150*time.Second, nil)
	require.Equal(t, 0, g.signal(sigTERM))
	zs := readZones(t, g.state)
	lost, dup := 0, 0
	var detail, sum []string
	if !credited {
		lost++
		detail = append(detail, "the real reports were not credited within 150 s")
	}
	for k, z := range zs {
		sum = append(sum, fmt.Sprintf("%s=%.2f/%.2fmm", strings.SplitN(k, "/", 2)[1], z.creditMM, z.capMM))
		// The cap is the commanded water (minutes x rate) plus 10 %, the
		// largest margin the trust boundary may state (common practice, no source).
		if z.creditMM > 1.1*z.capMM {
			dup++
			detail = append(detail, fmt.Sprintf("%s credited %.3g mm for %.3g mm commanded", k, z.creditMM, z.capMM))
		}
		if z.credits == 0 {
			lost++
			detail = append(detail, k+" real report not credited")
		}
	}
	sort.Strings(sum)
	fmu.Lock()
	d := fmt.Sprintf("forged=%d credit/commanded=[%s]", forged, strings.Join(sum, " "))
	fmu.Unlock()
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "forged-reports", trials: forged, lost: lost, duplicated: dup, detail: d}
}
