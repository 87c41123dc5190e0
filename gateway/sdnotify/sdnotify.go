// Package sdnotify tells systemd about the service's state through the
// notification socket a unit of Type=notify is given ($NOTIFY_SOCKET, a
// unix datagram socket; see sd_notify(3)): READY=1 once the gateway takes
// messages, WATCHDOG=1 while its intake loop is alive (WatchdogSec=),
// STOPPING=1 when the ordered shutdown starts. Outside systemd (no
// $NOTIFY_SOCKET) every call does nothing.
package sdnotify

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"os"
	"strconv"
	"time"
)

// The states sent.
const (
	Ready    = "READY=1"
	Stopping = "STOPPING=1"
	Watchdog = "WATCHDOG=1"
)

// Notifier sends notifications to one socket.
type Notifier struct {
	addr string // "" when not run by systemd
}

// FromEnv returns a Notifier for $NOTIFY_SOCKET ("@name" is the abstract
// namespace); with the variable unset it sends nothing.
func FromEnv() *Notifier { return &Notifier{addr: os.Getenv("NOTIFY_SOCKET")} }

// Enabled reports whether notifications go anywhere.
func (n *Notifier) Enabled() bool { return n.addr != "" }

// Notify sends state (e.g. Ready), one datagram.
func (n *Notifier) Notify(state string) error {
	if n.addr == "" {
		return nil
	}
	name := n.addr
	if name[0] == '@' {
		name = "\x00" + name[1:]
	}
	conn, err := net.DialUnix("unixgram", nil, &net.UnixAddr{Name: name, Net: "unixgram"})
	if err != nil {
		return fmt.Errorf("notify systemd %q: %w", state, err)
	}
	defer conn.Close()
	if _, err := conn.Write([]byte(state)); err != nil {
		return fmt.Errorf("notify systemd %q: %w", state, err)
	}
	return nil
}

// WatchdogInterval returns the unit's WatchdogSec from $WATCHDOG_USEC, or 0
// when no watchdog is set or it is meant for another process
// ($WATCHDOG_PID).
func WatchdogInterval() time.Duration {
	if pid := os.Getenv("WATCHDOG_PID"); pid != "" && pid != strconv.Itoa(os.Getpid()) {
		return 0
	}
	us, err := strconv.ParseInt(os.Getenv("WATCHDOG_USEC"), 10, 64)
	if err != nil || us <= 0 {
		return 0
	}
	return time.Duration(us) * time.Microsecond
}

// RunWatchdog sends Watchdog every interval/3 for as long as alive (e.g.
// the gateway's intake loop, gateway.Gateway.Alive) reports a beat within
// the last 2/3 of interval, until ctx ends. A stuck loop stops the pings
// and systemd restarts the service. Nothing is sent when interval is 0.
func (n *Notifier) RunWatchdog(ctx context.Context, interval time.Duration, alive func() time.Time, now func() time.Time, log *slog.Logger) {
	if interval <= 0 || !n.Enabled() {
		return
	}
	tick := time.NewTicker(interval / 3)
	defer tick.Stop()
	stale := false
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
		if age := now().Sub(alive()); age > 2*interval/3 {
			if !stale {
				log.Error("intake loop shows no sign of life; watchdog pings stopped", "last_beat_ago", age.Round(time.Second))
			}
			stale = true
			continue
		}
		stale = false
		if err := n.Notify(Watchdog); err != nil {
			log.Warn("watchdog ping", "err", err)
		}
	}
}
