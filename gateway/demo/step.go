package demo

import (
	"context"
	"fmt"
	"time"

	"etpulse/gateway"
)

// maxPasses bounds the gateway passes at one simulated minute (a command
// sent, its acceptance reported, and so on); the zones settle in two or
// three.
const maxPasses = 8

// stepper brings the demo to rest at each simulated minute, so every part
// acts at the minute it is due and the same seed prints the same table.
type stepper struct {
	g        *gateway.Gateway
	traffic  *traffic
	valves   *valves // nil without zones
	runDone  <-chan error
	readings uint64 // sensor messages published
}

// settle runs the minute at now to rest: the gateway handles every reading
// published so far and publishes the records it closed; the valves report
// what starts or finishes; then the gateway runs its passes at now
// (Gateway.Step: hour closes, the alert monitor, the zone scheduler), again
// while a pass sent messages. Each step waits for every message it caused
// to be handled.
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
		if err := s.g.Step(ctx, now); err != nil {
			return err
		}
		if err := s.quiet(ctx); err != nil {
			return err
		}
		if s.valves != nil && s.valves.answerStops() {
			if err := s.quiet(ctx); err != nil {
				return err
			}
		}
		if s.traffic.Sent() == sent {
			return nil
		}
	}
	return nil
}

// quiet waits until the gateway has handled every reading published, has
// published every record it committed, and no demo message is in flight. It
// sleeps on the gateway's progress and the traffic's idle signal, not on a
// timer.
func (s *stepper) quiet(ctx context.Context) error {
	for {
		progress := s.g.Progress()
		idle := s.traffic.Idle()
		caughtUp := func() bool { return s.g.Handled() >= s.readings && s.g.Published() >= s.g.Emitted() }
		var waitIdle <-chan struct{}
		if caughtUp() {
			select {
			case <-idle:
				// Handling a message may have committed records: look again.
				if caughtUp() {
					return nil
				}
				continue
			default:
				waitIdle = idle
			}
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case err := <-s.runDone:
			return fmt.Errorf("gateway stopped: %w", err)
		case <-progress:
		case <-waitIdle:
		}
	}
}
