package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"math"
	"sort"
	"sync"
	"time"

	"etpulse/gateway"
	"etpulse/gateway/mqtt"
	"etpulse/gateway/zones"
)

// valves are the demo's simulated valve controllers, stepped by the demo at
// each simulated minute instead of sleeping on timers: a command is
// accepted as it arrives, reported started at its start and finished when
// its minutes have run. A repeated command id is answered with its latest
// report and never run twice; a stop closes a running valve (stopped, with
// the minutes run) or keeps a waiting run from starting. A stop is answered
// when the demo asks (answerStops), after the gateway's pass that sent it
// has come to rest, so the table shows the stop before its credit.
type valves struct {
	mqtt  gateway.Broker
	clock func() time.Time
	log   *slog.Logger

	mu    sync.Mutex
	runs  map[string]*valveRun // command id -> run
	stops []*valveRun          // stopped runs whose report is still to send, in arrival order
}

type valveRun struct {
	cmd     zones.CommandMessage
	topic   string // report topic
	started bool
	last    *zones.ReportMessage // final report, once ended
}

// serve subscribes to each zone's command topic (topics: command topic ->
// report topic).
func (v *valves) serve(topics map[string]string) error {
	v.runs = map[string]*valveRun{}
	cmdTopics := make([]string, 0, len(topics))
	for t := range topics {
		cmdTopics = append(cmdTopics, t)
	}
	sort.Strings(cmdTopics)
	for _, t := range cmdTopics {
		report := topics[t]
		if err := v.mqtt.Subscribe(t, 1, func(m mqtt.Message) {
			v.handle(m.Payload, report)
			m.Ack()
		}); err != nil {
			return fmt.Errorf("valves: subscribe %s: %w", t, err)
		}
	}
	return nil
}

func (v *valves) handle(payload []byte, reportTopic string) {
	msg, err := zones.DecodeValveMessage(payload)
	if err != nil {
		v.log.Warn("demo valves: bad command", "err", err)
		return
	}
	v.mu.Lock()
	defer v.mu.Unlock()
	if msg.Stop != nil {
		v.stopLocked(msg.Stop.ID, reportTopic)
		return
	}
	c := *msg.Run
	if r, ok := v.runs[c.ID]; ok {
		// A retry: never run again, answer with what is known.
		if r.last != nil {
			v.publish(r.topic, *r.last)
		} else {
			v.publish(r.topic, zones.ReportMessage{ID: c.ID, State: "accepted"})
		}
		return
	}
	v.runs[c.ID] = &valveRun{cmd: c, topic: reportTopic}
	v.publish(reportTopic, zones.ReportMessage{ID: c.ID, State: "accepted"})
}

func (v *valves) stopLocked(id, reportTopic string) {
	r, ok := v.runs[id]
	if !ok {
		r = &valveRun{cmd: zones.CommandMessage{ID: id}, topic: reportTopic}
		v.runs[id] = r
	}
	if r.last == nil {
		ran := 0.0
		if r.started {
			ran = math.Round(min(v.clock().Sub(r.cmd.Start).Minutes(), float64(r.cmd.Minutes))*100) / 100
		}
		r.last = &zones.ReportMessage{ID: id, State: "stopped", MinutesRun: &ran}
	}
	v.stops = append(v.stops, r)
}

// answerStops publishes the reports of the stops received since the last
// call and returns whether there were any.
func (v *valves) answerStops() bool {
	v.mu.Lock()
	defer v.mu.Unlock()
	for _, r := range v.stops {
		v.publish(r.topic, *r.last)
	}
	n := len(v.stops)
	v.stops = v.stops[:0]
	return n > 0
}

// step reports the runs that start or finish by now, in order of start and id.
func (v *valves) step(now time.Time) {
	v.mu.Lock()
	defer v.mu.Unlock()
	var due []*valveRun
	for _, r := range v.runs {
		if r.last == nil && !r.cmd.Start.After(now) {
			due = append(due, r)
		}
	}
	sort.Slice(due, func(i, j int) bool {
		if !due[i].cmd.Start.Equal(due[j].cmd.Start) {
			return due[i].cmd.Start.Before(due[j].cmd.Start)
		}
		return due[i].cmd.ID < due[j].cmd.ID
	})
	for _, r := range due {
		if !r.started {
			r.started = true
			v.publish(r.topic, zones.ReportMessage{ID: r.cmd.ID, State: "started"})
		}
		if end := r.cmd.Start.Add(time.Duration(r.cmd.Minutes) * time.Minute); !end.After(now) {
			ran := float64(r.cmd.Minutes)
			r.last = &zones.ReportMessage{ID: r.cmd.ID, State: "finished", MinutesRun: &ran}
			v.publish(r.topic, *r.last)
		}
	}
}

func (v *valves) publish(topic string, r zones.ReportMessage) {
	b, err := json.Marshal(r)
	if err == nil {
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		err = v.mqtt.Publish(ctx, topic, 1, false, b)
		cancel()
	}
	if err != nil {
		v.log.Warn("demo valves: report not published", "id", r.ID, "state", r.State, "err", err)
	}
}

// running returns the commands whose valves are open now: started and not
// yet finished or stopped.
func (v *valves) running() []zones.CommandMessage {
	v.mu.Lock()
	defer v.mu.Unlock()
	var out []zones.CommandMessage
	for _, r := range v.runs {
		if r.started && r.last == nil {
			out = append(out, r.cmd)
		}
	}
	return out
}
