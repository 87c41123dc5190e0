package demo

import (
	"context"
	"fmt"
	"time"

	"etpulse/gateway"
)

// steppedLoops are the loops the demo steps (Clock.Park), in
// the order it runs them at each simulated minute: the alert monitor
// (silence checks, reading alerts), then the zone scheduler, which acts on
// everything the minute brought.
var steppedLoops = []string{gateway.TimerAlerts, gateway.TimerZones}

// maxPasses bounds the scheduler passes at one simulated minute (a command
// sent, its acceptance reported, and so on); the zones settle in two or
// three.
const maxPasses = 8

// stepper brings the demo to rest at each simulated minute, so every part
// acts at the minute it is due and the same seed prints the same table.
type stepper struct {
	g        *gateway.Gateway
	clock    *Clock
	traffic  *traffic
	valves   *valves // nil without zones
	runDone  <-chan error
	readings uint64 // sensor messages published
}

// settle runs the minute at now to rest: the gateway handles every reading
// published so far and publishes the records it closed; the valves report
// what starts or finishes; then the stepped loops run one pass each, in
// order, again while a pass sent messages. Each step waits for every message
// it caused to be handled.
func (s *stepper) settle(ctx context.Context, now time.Time) error {
	if err := s.quiet(ctx); err != nil {
		return err
	}
	if s.valves != nil {
		s.valves.step(now)
		if err := s.quiet(ctx); err != nil {
			return err
		}
	}
	for range maxPasses {
		sent := s.traffic.Sent()
		for _, pkg := range steppedLoops {
			if err := s.pass(ctx, pkg); err != nil {
				return err
			}
		}
		if s.traffic.Sent() == sent {
			return nil
		}
	}
	return nil
}

// pass runs one pass of the stepped loop of pkg and waits until it is
// parked again and the messages it sent are handled. The alert monitor
// parks only while it has a silence deadline; without one it is left
// alone.
func (s *stepper) pass(ctx context.Context, pkg string) error {
	mustPark := pkg != steppedLoops[0]
	if !mustPark && !s.clock.IsParked(pkg) {
		return nil
	}
	for !s.clock.IsParked(pkg) {
		if err := s.wait(ctx, s.clock.Parked(pkg)); err != nil {
			return err
		}
	}
	s.clock.Release(pkg)
	var bound <-chan time.Time
	if !mustPark {
		bound = time.After(2 * time.Second) // it may have no deadline left
	}
	for !s.clock.IsParked(pkg) {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case err := <-s.runDone:
			return fmt.Errorf("gateway stopped: %w", err)
		case <-bound:
			return s.quiet(ctx)
		case <-s.clock.Parked(pkg):
		}
	}
	return s.quiet(ctx)
}

// quiet waits until the gateway has handled every reading published, has
// published every record it committed, and no demo message is in flight.
func (s *stepper) quiet(ctx context.Context) error {
	for {
		if s.g.Handled() >= s.readings && s.g.Published() >= s.g.Emitted() {
			select {
			case <-s.traffic.Idle():
				// Handling a message may have committed records: look again.
				if s.g.Handled() >= s.readings && s.g.Published() >= s.g.Emitted() {
					return nil
				}
				continue
			default:
			}
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case err := <-s.runDone:
			return fmt.Errorf("gateway stopped: %w", err)
		case <-time.After(200 * time.Microsecond):
		}
	}
}

// wait waits for ch, the context or the gateway's end.
func (s *stepper) wait(ctx context.Context, ch <-chan struct{}) error {
	select {
	case <-ch:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	case err := <-s.runDone:
		return fmt.Errorf("gateway stopped: %w", err)
	}
}
