package sdnotify

import (
	"context"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"strconv"
	"sync/atomic"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func listen(t *testing.T) (string, *net.UnixConn) {
	t.Helper()
	path := filepath.Join(t.TempDir(), "notify.sock")
	conn, err := net.ListenUnixgram("unixgram", &net.UnixAddr{Name: path, Net: "unixgram"})
	require.NoError(t, err)
	t.Cleanup(func() { conn.Close() })
	return path, conn
}

func read(t *testing.T, conn *net.UnixConn, within time.Duration) (string, bool) {
	t.Helper()
	require.NoError(t, conn.SetReadDeadline(time.Now().Add(within)))
	buf := make([]byte, 256)
	n, err := conn.Read(buf)
	if err != nil {
		return "", false
	}
	return string(buf[:n]), true
}

func TestNotifyWithoutSocketDoesNothing(t *testing.T) {
	t.Setenv("NOTIFY_SOCKET", "")
	n := FromEnv()
	assert.False(t, n.Enabled())
	assert.NoError(t, n.Notify(Ready))
}

func TestNotifySendsOneDatagram(t *testing.T) {
	path, conn := listen(t)
	t.Setenv("NOTIFY_SOCKET", path)
	require.NoError(t, FromEnv().Notify(Ready))
	got, ok := read(t, conn, 5*time.Second)
	require.True(t, ok)
	assert.Equal(t, "READY=1", got)
}

// sd_notify(3): a watchdog meant for another process is not ours.
func TestWatchdogInterval(t *testing.T) {
	t.Setenv("WATCHDOG_USEC", "90000000")
	t.Setenv("WATCHDOG_PID", "")
	assert.Equal(t, 90*time.Second, WatchdogInterval())
	t.Setenv("WATCHDOG_PID", strconv.Itoa(os.Getpid()))
	assert.Equal(t, 90*time.Second, WatchdogInterval())
	t.Setenv("WATCHDOG_PID", strconv.Itoa(os.Getpid()+1))
	assert.Zero(t, WatchdogInterval())
	t.Setenv("WATCHDOG_PID", "")
	t.Setenv("WATCHDOG_USEC", "soon")
	assert.Zero(t, WatchdogInterval())
}

// Pings go out while the beat is recent and stop once it is older than
// 2/3 of the interval (a stuck intake loop), so systemd restarts the service.
func TestWatchdogStopsWhenIntakeIsStuck(t *testing.T) {
	path, conn := listen(t)
	t.Setenv("NOTIFY_SOCKET", path)
	var beat atomic.Int64
	beat.Store(time.Now().UnixNano())
	alive := func() time.Time { return time.Unix(0, beat.Load()) }
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan struct{})
	go func() {
		defer close(done)
		FromEnv().RunWatchdog(ctx, 300*time.Millisecond, alive, time.Now, slog.New(slog.DiscardHandler))
	}()
	got, ok := read(t, conn, 5*time.Second)
	require.True(t, ok, "no ping while alive")
	assert.Equal(t, "WATCHDOG=1", got)

	beat.Store(time.Now().Add(-time.Hour).UnixNano()) // the loop stopped going round
	for range 2 {                                     // drain a ping already in flight
		if _, ok := read(t, conn, 400*time.Millisecond); !ok {
			break
		}
	}
	_, ok = read(t, conn, 600*time.Millisecond)
	assert.False(t, ok, "pinged for a stuck loop")
	cancel()
	<-done
}
