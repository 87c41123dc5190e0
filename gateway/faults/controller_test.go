package faults_test

import (
	"context"
	"encoding/json"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/zones"
)

// controller simulates the farm's valve controllers on the wall clock: a
// command is answered "accepted" at once, "started" at its start and
// "finished" (all its minutes run) right after, so a run is credited about
// a minute after it is ordered instead of after its real minutes. A
// repeated command id is answered with its latest report and never run
// twice; a stop ends a run that has not finished ("stopped").
type controller struct {
	t *testing.T
	c *mqtt.Client

	mu      sync.Mutex
	runs    map[string]*ctlRun
	topicOf map[string]string // command id -> report topic
	timers  []*time.Timer
}

type ctlRun struct {
	cmd  zones.CommandMessage
	last zones.ReportMessage
}

// startController connects the simulated controllers of every zone in the
// configuration at cfgPath.
func startController(t *testing.T, url, cfgPath string) *controller {
	t.Helper()
	cfg, err := config.Load(cfgPath)
	require.NoError(t, err)
	c, err := mqtt.Dial(context.Background(), mqtt.Options{URL: url, ClientID: "faults-valves", CleanSession: true, Workers: 1})
	require.NoError(t, err)
	ctl := &controller{t: t, c: c, runs: map[string]*ctlRun{}, topicOf: map[string]string{}}
	t.Cleanup(func() {
		ctl.mu.Lock()
		for _, tm := range ctl.timers {
			tm.Stop()
		}
		ctl.mu.Unlock()
		c.Close(time.Second)
	})
	for _, s := range cfg.Sites {
		for i := range s.Zones {
			report := s.Zones[i].ReportTopicIn(cfg.Prefix(), s.ID)
			require.NoError(t, c.Subscribe(s.Zones[i].CommandTopicIn(cfg.Prefix(), s.ID), 1, func(m mqtt.Message) {
				ctl.handle(m.Payload, report)
				m.Ack()
			}))
		}
	}
	return ctl
}

func (ctl *controller) handle(payload []byte, report string) {
	msg, err := zones.DecodeValveMessage(payload)
	if err != nil {
		ctl.t.Errorf("controller: undecodable command: %v", err)
		return
	}
	ctl.mu.Lock()
	defer ctl.mu.Unlock()
	if msg.Stop != nil {
		r, ok := ctl.runs[msg.Stop.ID]
		if !ok || r.last.State == "accepted" || r.last.State == "started" {
			zero := 0.0
			r = &ctlRun{last: zones.ReportMessage{ID: msg.Stop.ID, State: "stopped", MinutesRun: &zero}}
			ctl.runs[msg.Stop.ID] = r
		}
		ctl.publishLocked(report, r.last)
		return
	}
	c := *msg.Run
	if r, ok := ctl.runs[c.ID]; ok {
		ctl.publishLocked(report, r.last) // a retry: never run twice
		return
	}
	r := &ctlRun{cmd: c, last: zones.ReportMessage{ID: c.ID, State: "accepted"}}
	ctl.runs[c.ID] = r
	ctl.publishLocked(report, r.last)
	// The run's start is a wall-clock event the controller waits for.
	ctl.timers = append(ctl.timers, time.AfterFunc(time.Until(c.Start)+50*time.Millisecond, func() {
		ctl.mu.Lock()
		defer ctl.mu.Unlock()
		if r.last.State != "accepted" {
			return // stopped before it started
		}
		r.last = zones.ReportMessage{ID: c.ID, State: "started"}
		ctl.publishLocked(report, r.last)
		ran := float64(c.Minutes)
		r.last = zones.ReportMessage{ID: c.ID, State: "finished", MinutesRun: &ran}
		ctl.publishLocked(report, r.last)
	}))
}

func (ctl *controller) publishLocked(topic string, r zones.ReportMessage) {
	b, err := json.Marshal(r)
	if err == nil {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		err = ctl.c.Publish(ctx, topic, 1, false, b)
		cancel()
	}
	if err != nil {
		ctl.t.Logf("controller: report %s %s not published: %v", r.ID, r.State, err)
	}
}
