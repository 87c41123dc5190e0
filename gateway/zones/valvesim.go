package zones

import (
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"etpulse/gateway/mqtt"
)

// Behaviour is how a simulated valve controller answers one command.
type Behaviour struct {
	Lose      bool    // never report anything (a lost controller or radio link)
	Fail      bool    // report failed after FailAfter minutes
	FailAfter float64 // minutes run before failing
	Reason    string  // failure reason
	Duplicate bool    // publish the finished report twice
	// VolumeLPerMin, when > 0, adds a flow-meter volume of minutes x this.
	VolumeLPerMin float64
	// Hold, when set, withholds every report until the returned channel is
	// closed (tests use it to kill the gateway between command and report).
	Hold func(CommandMessage) <-chan struct{}
}

// ValveSimulator answers commands the way a valve controller does, for the
// demo and the tests: accepted, started, then finished (or failed) at once,
// and a repeated command id answered with its last report, never run twice.
type ValveSimulator struct {
	MQTT   Broker
	Logger *slog.Logger
	// Behave chooses the behaviour per command; nil: every run is normal.
	Behave func(CommandMessage) Behaviour
	// Clock and After, when both set, pace the reports: started at the
	// planned start, finished when the minutes have run. Unset: at once.
	Clock func() time.Time
	After func(time.Duration) <-chan time.Time

	mu       sync.Mutex
	received map[string]int           // command id -> times received
	last     map[string]ReportMessage // command id -> final report
	runs     []CommandMessage         // first receipt of each id
}

// Serve subscribes to each zone's command topic; reports go to the paired
// report topic (topics: command topic -> report topic).
func (v *ValveSimulator) Serve(topics map[string]string) error {
	v.mu.Lock()
	if v.received == nil {
		v.received, v.last = map[string]int{}, map[string]ReportMessage{}
	}
	v.mu.Unlock()
	if v.Logger == nil {
		v.Logger = slog.New(slog.DiscardHandler)
	}
	for cmdTopic, reportTopic := range topics {
		reportTopic := reportTopic
		if err := v.MQTT.Subscribe(cmdTopic, 1, func(m mqtt.Message) {
			v.handle(m, reportTopic)
			m.Ack()
		}); err != nil {
			return fmt.Errorf("valve simulator: subscribe %s: %w", cmdTopic, err)
		}
	}
	return nil
}

// Received returns how many times a command id was received.
func (v *ValveSimulator) Received(id string) int {
	v.mu.Lock()
	defer v.mu.Unlock()
	return v.received[id]
}

// Runs returns the commands run (first receipt of each id), in order.
func (v *ValveSimulator) Runs() []CommandMessage {
	v.mu.Lock()
	defer v.mu.Unlock()
	return append([]CommandMessage(nil), v.runs...)
}

// Republish publishes the last report of id again (a confused controller).
func (v *ValveSimulator) Republish(ctx context.Context, reportTopic, id string) error {
	v.mu.Lock()
	r, ok := v.last[id]
	v.mu.Unlock()
	if !ok {
		return fmt.Errorf("valve simulator: no report for %s", id)
	}
	return v.publish(ctx, reportTopic, r)
}

func (v *ValveSimulator) publish(ctx context.Context, topic string, r ReportMessage) error {
	b, err := json.Marshal(r)
	if err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	return v.MQTT.Publish(ctx, topic, 1, false, b)
}

func (v *ValveSimulator) handle(m mqtt.Message, reportTopic string) {
	c, err := DecodeCommand(m.Payload)
	if err != nil {
		v.Logger.Warn("valve simulator: bad command", "err", err)
		return
	}
	var b Behaviour
	if v.Behave != nil {
		b = v.Behave(c)
	}
	v.mu.Lock()
	v.received[c.ID]++
	again := v.received[c.ID] > 1
	last, done := v.last[c.ID]
	if !again {
		v.runs = append(v.runs, c)
	}
	v.mu.Unlock()
	if b.Lose {
		return
	}
	ctx := context.Background()
	if again {
		// Never run a repeated id again: answer with what is known.
		if done {
			_ = v.publish(ctx, reportTopic, last)
		}
		return
	}
	go func() {
		if b.Hold != nil {
			<-b.Hold(c)
		}
		minutes := float64(c.Minutes)
		final := ReportMessage{ID: c.ID, State: "finished"}
		if b.Fail {
			minutes = b.FailAfter
		}
		if b.Fail {
			final = ReportMessage{ID: c.ID, State: "failed", Reason: b.Reason}
		}
		final.MinutesRun = &minutes
		if b.VolumeLPerMin > 0 {
			vol := minutes * b.VolumeLPerMin
			final.VolumeL = &vol
		}
		wait := func(until time.Time) {
			if v.Clock != nil && v.After != nil {
				if d := until.Sub(v.Clock()); d > 0 {
					<-v.After(d)
				}
			}
		}
		start := c.Start
		if v.Clock != nil && v.Clock().After(start) {
			start = v.Clock()
		}
		for i, r := range []ReportMessage{{ID: c.ID, State: "accepted"}, {ID: c.ID, State: "started"}, final} {
			switch i {
			case 1:
				wait(start)
			case 2:
				wait(start.Add(time.Duration(minutes * float64(time.Minute))))
			}
			if i == 2 {
				v.mu.Lock()
				v.last[c.ID] = final
				v.mu.Unlock()
			}
			if err := v.publish(ctx, reportTopic, r); err != nil {
				v.Logger.Warn("valve simulator: report not published", "id", c.ID, "err", err)
				return
			}
		}
		if b.Duplicate {
			_ = v.publish(ctx, reportTopic, final)
		}
	}()
}
