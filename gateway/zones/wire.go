package zones

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/internal/precision"
)

// CommandMessage is the JSON a valve controller receives on its zone's
// command topic (QoS 1, not retained) to run a valve. The controller must run
// the valve for Minutes starting at Start (at once if Start has passed),
// never start after Expiry, and treat ID as idempotent: a repeated ID (a
// retry, Attempt > 1) must not run the valve again; answer it with the latest
// report instead. The same topic carries StopMessage; DecodeValveMessage
// tells them apart by "action".
type CommandMessage struct {
	ID string `json:"id"`
	// Action is absent (as the gateway sends it) or "run".
	Action  string             `json:"action,omitempty"`
	Zone    string             `json:"zone"`
	Valve   string             `json:"valve"`
	Minutes int                `json:"minutes"`
	Start   time.Time          `json:"start"`  // RFC 3339, UTC
	Expiry  time.Time          `json:"expiry"` // RFC 3339, UTC
	Cycle   int                `json:"cycle"`  // 1-based
	Cycles  int                `json:"cycles"`
	Attempt int                `json:"attempt"`
	Reason  controllers.Reason `json:"reason"`
}

// StopMessage is the JSON that tells a valve controller, on the zone's
// command topic (QoS 1, not retained), to close the valve of command ID now,
// or never to open it when the run has not started. The controller answers
// on the report topic: "stopped" (or "finished") with the minutes actually
// run; "stopped" with minutes_run 0 for a run that never started or an ID it
// does not know; its latest report for an ID already finished or failed. A
// repeated stop (Attempt > 1) is answered the same way.
type StopMessage struct {
	ID      string `json:"id"`
	Zone    string `json:"zone"`
	Valve   string `json:"valve"`
	Action  string `json:"action"` // always "stop"
	Cause   string `json:"cause"`  // why, e.g. "manual hold", "rain delay 24 h"
	Attempt int    `json:"attempt"`
}

// ValveMessage is one decoded message of a command topic: exactly one of Run
// and Stop is set.
type ValveMessage struct {
	Run  *CommandMessage
	Stop *StopMessage
}

// ReportMessage is the JSON a valve controller publishes on its zone's
// report topic. State is accepted, started, finished, failed or stopped.
// MinutesRun and VolumeL (a flow-meter reading, litres) are optional.
type ReportMessage struct {
	ID         string   `json:"id"`
	State      string   `json:"state"`
	MinutesRun *float64 `json:"minutes_run,omitempty"`
	VolumeL    *float64 `json:"volume_l,omitempty"`
	Reason     string   `json:"reason,omitempty"`
}

// HoldRequest is a manual hold, release or rain delay, published on
// <prefix>/<site>/hold. An empty Zone means the whole site.
type HoldRequest struct {
	ID     string  `json:"id"`     // the requester's id, echoed in the reply
	Zone   string  `json:"zone"`   // zone id, or "" for the site
	Action string  `json:"action"` // hold, release or rain_delay
	Hours  float64 `json:"hours"`  // hold: 0 = until released; rain_delay: 1-240
	Reason string  `json:"reason"`
}

// HoldReply answers a HoldRequest on <prefix>/<site>/hold/reply.
type HoldReply struct {
	ID     string     `json:"id"`
	OK     bool       `json:"ok"`
	Zone   string     `json:"zone,omitempty"`
	Action string     `json:"action,omitempty"`
	Until  *time.Time `json:"until,omitempty"` // absent: until released
	Error  string     `json:"error,omitempty"`
}

// maxPayload bounds the messages this package decodes.
const maxPayload = 4096

func stopMessage(c *controllers.Command) StopMessage {
	return StopMessage{ID: c.ID, Zone: c.Zone, Valve: c.Valve, Action: "stop", Cause: c.StopReason, Attempt: c.StopAttempts}
}

func commandMessage(c *controllers.Command) CommandMessage {
	return CommandMessage{ID: c.ID, Zone: c.Zone, Valve: c.Valve, Minutes: c.Minutes,
		Start: c.Start.UTC(), Expiry: c.Expiry.UTC(), Cycle: c.Cycle, Cycles: c.Cycles,
		Attempt: c.Attempts, Reason: wireReason(c.Reason)}
}

// wireReason is r with its depths rounded for the wire (precision.MM).
func wireReason(r controllers.Reason) controllers.Reason {
	mm := func(v float64) float64 { return precision.Round(precision.MM, v) }
	r.DepletionMM, r.TriggerMM, r.EtcSinceLastMM = mm(r.DepletionMM), mm(r.TriggerMM), mm(r.EtcSinceLastMM)
	r.ProjectedMM, r.ShortMM, r.LeachMM = mm(r.ProjectedMM), mm(r.ShortMM), mm(r.LeachMM)
	return r
}

// setDepths fills the depths of a water reply, rounded for the wire
// (precision.MM).
func (r *WaterReply) setDepths(net, drainage, previous, depletion float64) {
	r.NetMM, r.DrainageMM = precision.Ptr(precision.MM, net), precision.Ptr(precision.MM, drainage)
	r.PreviousMM, r.DepletionMM = precision.Ptr(precision.MM, previous), precision.Ptr(precision.MM, depletion)
}

func decodeStrict(b []byte, v any) error {
	if len(b) > maxPayload {
		return fmt.Errorf("payload of %d bytes exceeds %d", len(b), maxPayload)
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return err
	}
	if dec.More() {
		return fmt.Errorf("trailing data after the JSON object")
	}
	return nil
}

// DecodeCommand parses a run command (for valve controllers and tests); a
// stop message is refused (use DecodeValveMessage to take both).
func DecodeCommand(b []byte) (CommandMessage, error) {
	var c CommandMessage
	if err := decodeStrict(b, &c); err != nil {
		return CommandMessage{}, fmt.Errorf("decode command: %w", err)
	}
	if c.Action != "" && c.Action != "run" {
		return CommandMessage{}, fmt.Errorf("decode command: action: must be absent or \"run\", got %q", c.Action)
	}
	if c.ID == "" {
		return CommandMessage{}, fmt.Errorf("decode command: id: empty")
	}
	return c, nil
}

// DecodeValveMessage parses a message of a command topic: a run command
// ("action" absent or "run") or a stop ("action": "stop").
func DecodeValveMessage(b []byte) (ValveMessage, error) {
	if len(b) > maxPayload {
		return ValveMessage{}, fmt.Errorf("decode valve message: payload of %d bytes exceeds %d", len(b), maxPayload)
	}
	var probe struct {
		Action string `json:"action"`
	}
	if err := json.Unmarshal(b, &probe); err != nil {
		return ValveMessage{}, fmt.Errorf("decode valve message: %w", err)
	}
	switch probe.Action {
	case "", "run":
		c, err := DecodeCommand(b)
		if err != nil {
			return ValveMessage{}, err
		}
		return ValveMessage{Run: &c}, nil
	case "stop":
		var st StopMessage
		if err := decodeStrict(b, &st); err != nil {
			return ValveMessage{}, fmt.Errorf("decode stop: %w", err)
		}
		if st.ID == "" {
			return ValveMessage{}, fmt.Errorf("decode stop: id: empty")
		}
		return ValveMessage{Stop: &st}, nil
	}
	return ValveMessage{}, fmt.Errorf("decode valve message: action: must be run or stop, got %q", probe.Action)
}

// DecodeReport parses and checks a valve report.
func DecodeReport(b []byte) (controllers.Report, error) {
	var m ReportMessage
	if err := decodeStrict(b, &m); err != nil {
		return controllers.Report{}, fmt.Errorf("decode report: %w", err)
	}
	r := controllers.Report{ID: m.ID, State: controllers.ReportState(m.State), Reason: m.Reason}
	if m.MinutesRun != nil {
		r.MinutesRun, r.HasMinutes = *m.MinutesRun, true
	}
	if m.VolumeL != nil {
		r.VolumeL, r.HasVolume = *m.VolumeL, true
	}
	if len(r.Reason) > 256 {
		r.Reason = r.Reason[:256]
	}
	if err := r.Validate(); err != nil {
		return controllers.Report{}, fmt.Errorf("decode report: %w", err)
	}
	return r, nil
}

// DecodeHoldRequest parses and checks a hold request.
func DecodeHoldRequest(b []byte) (HoldRequest, error) {
	var h HoldRequest
	if err := decodeStrict(b, &h); err != nil {
		return HoldRequest{}, fmt.Errorf("decode hold request: %w", err)
	}
	if len(h.ID) > 128 || len(h.Reason) > 256 || len(h.Zone) > 64 {
		return HoldRequest{}, fmt.Errorf("decode hold request: id, zone or reason too long")
	}
	switch h.Action {
	case "hold":
		if !(h.Hours >= 0 && h.Hours <= 24*365) {
			return HoldRequest{}, fmt.Errorf("decode hold request: hours: must be within 0-8760 (0: until released), got %v", h.Hours)
		}
	case "rain_delay":
		if !(h.Hours >= 1 && h.Hours <= 240) || math.IsNaN(h.Hours) {
			return HoldRequest{}, fmt.Errorf("decode hold request: hours: must be within 1-240 for a rain delay, got %v", h.Hours)
		}
	case "release":
	default:
		return HoldRequest{}, fmt.Errorf("decode hold request: action: must be hold, release or rain_delay, got %q", h.Action)
	}
	return h, nil
}
