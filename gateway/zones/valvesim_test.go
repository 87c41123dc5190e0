package zones

import (
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"math"
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
	// IgnoreStop: stops for this command are received but never acted on
	// or answered (a controller with old firmware, or a lost link).
	IgnoreStop bool
	// SilentAfterStart: after its started report the controller goes
	// silent (rebooted, hung): the valve stays open, no finished report,
	// and stops are ignored until the AnswerStop-th one, which closes the
	// valve and is answered stopped with the minutes it was open.
	SilentAfterStart bool
	AnswerStop       int
}

// ValveSimulator answers commands the way a valve controller does, for the
// tests of this package: accepted, started, then finished (or failed) at once,
// and a repeated command id answered with its last report, never run twice.
// It honours stops: a running valve is closed and reported stopped with the
// minutes it ran; a run not yet started never starts (stopped, 0 minutes).
type ValveSimulator struct {
	MQTT   Broker
	Logger *slog.Logger
	// Behave chooses the behaviour per command; nil: every run is normal.
	Behave func(CommandMessage) Behaviour
	// Clock and After, when both set, pace the reports: started at the
	// planned start, finished when the minutes have run. Unset: at once.
	Clock func() time.Time
	After func(time.Duration) <-chan time.Time
	// RunEnd, when set on an unpaced simulator, is called with the end of
	// a run before its final report, so a test can move the gateway's clock
	// past it (a report of a run that cannot have ended yet is refused).
	RunEnd func(end time.Time)

	mu       sync.Mutex
	received map[string]int           // command id -> times received
	stops    map[string]int           // command id -> stops received
	running  map[string]chan struct{} // command id -> closed to stop the run
	behave   map[string]Behaviour     // command id -> its behaviour
	last     map[string]ReportMessage // command id -> final report
	runs     []CommandMessage         // first receipt of each id
}

// Serve subscribes to each zone's command topic; reports go to the paired
// report topic (topics: command topic -> report topic).
func (v *ValveSimulator) Serve(topics map[string]string) error {
	v.mu.Lock()
	if v.received == nil {
		v.received, v.last = map[string]int{}, map[string]ReportMessage{}
		v.stops, v.running, v.behave = map[string]int{}, map[string]chan struct{}{}, map[string]Behaviour{}
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

// Stops returns how many stops for a command id were received.
func (v *ValveSimulator) Stops(id string) int {
	v.mu.Lock()
	defer v.mu.Unlock()
	return v.stops[id]
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
	msg, err := DecodeValveMessage(m.Payload)
	if err != nil {
		v.Logger.Warn("valve simulator: bad command", "err", err)
		return
	}
	if msg.Stop != nil {
		v.stop(*msg.Stop, reportTopic)
		return
	}
	c := *msg.Run
	var b Behaviour
	if v.Behave != nil {
		b = v.Behave(c)
	}
	stop := make(chan struct{})
	v.mu.Lock()
	v.received[c.ID]++
	again := v.received[c.ID] > 1
	last, done := v.last[c.ID]
	if !again {
		v.runs = append(v.runs, c)
		v.behave[c.ID] = b
		if !b.Lose {
			v.running[c.ID] = stop
		}
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
	go v.run(c, b, reportTopic, stop)
}

// stop handles a stop: the running valve closes (its run reports stopped),
// a finished run is answered with its last report, an unknown id with
// stopped after 0 minutes.
func (v *ValveSimulator) stop(st StopMessage, reportTopic string) {
	v.mu.Lock()
	v.stops[st.ID]++
	b := v.behave[st.ID]
	ch, running := v.running[st.ID]
	last, done := v.last[st.ID]
	_, known := v.received[st.ID]
	if running && b.SilentAfterStart && v.stops[st.ID] < b.AnswerStop {
		v.mu.Unlock()
		return // not heard: the valve stays open
	}
	if running {
		delete(v.running, st.ID)
	}
	if !known && !done {
		zero := 0.0
		last, done = ReportMessage{ID: st.ID, State: "stopped", MinutesRun: &zero}, true
		v.last[st.ID] = last
	}
	v.mu.Unlock()
	switch {
	case b.IgnoreStop || b.Lose:
	case running:
		close(ch)
	case done:
		_ = v.publish(context.Background(), reportTopic, last)
	}
}

// run reports one command's run: accepted, started at the planned start,
// then finished (or failed) when the minutes have run, or stopped early.
func (v *ValveSimulator) run(c CommandMessage, b Behaviour, reportTopic string, stop <-chan struct{}) {
	ctx := context.Background()
	if b.Hold != nil {
		<-b.Hold(c)
	}
	minutes := float64(c.Minutes)
	final := ReportMessage{ID: c.ID, State: "finished"}
	if b.Fail {
		minutes = b.FailAfter
		final = ReportMessage{ID: c.ID, State: "failed", Reason: b.Reason}
	}
	paced := v.Clock != nil && v.After != nil
	// wait waits until the given time on the simulator's clock; false when
	// a stop came first.
	wait := func(until time.Time) bool {
		if paced {
			if d := until.Sub(v.Clock()); d > 0 {
				select {
				case <-v.After(d):
				case <-stop:
					return false
				}
			}
		}
		select {
		case <-stop:
			return false
		default:
			return true
		}
	}
	start := c.Start
	if paced && v.Clock().After(start) {
		start = v.Clock()
	}
	report := func(r ReportMessage) bool {
		if err := v.publish(ctx, reportTopic, r); err != nil {
			v.Logger.Warn("valve simulator: report not published", "id", c.ID, "err", err)
			return false
		}
		return true
	}
	finish := func(r ReportMessage, ran float64) {
		r.MinutesRun = &ran
		if b.VolumeLPerMin > 0 {
			vol := ran * b.VolumeLPerMin
			r.VolumeL = &vol
		}
		v.mu.Lock()
		v.last[c.ID] = r
		delete(v.running, c.ID)
		v.mu.Unlock()
		if report(r) && b.Duplicate {
			_ = v.publish(ctx, reportTopic, r)
		}
	}
	stopped := ReportMessage{ID: c.ID, State: "stopped"}
	if !report(ReportMessage{ID: c.ID, State: "accepted"}) {
		return
	}
	if !wait(start) {
		finish(stopped, 0)
		return
	}
	if !report(ReportMessage{ID: c.ID, State: "started"}) {
		return
	}
	end := start.Add(time.Duration(minutes * float64(time.Minute)))
	if b.SilentAfterStart {
		<-stop // open until a stop is heard, however long that takes
		end = v.Clock()
	}
	if !wait(end) || b.SilentAfterStart {
		ran := 0.0
		if paced {
			ran = max(v.Clock().Sub(start).Minutes(), 0)
			if !b.SilentAfterStart { // a hung controller's valve stays open past its minutes
				ran = min(ran, minutes)
			}
			ran = math.Round(ran*100) / 100
		}
		finish(stopped, ran)
		return
	}
	if !paced && v.RunEnd != nil {
		v.RunEnd(start.Add(time.Duration(minutes * float64(time.Minute))))
	}
	finish(final, minutes)
}
