package testenv

import (
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"sync"
	"testing"
	"time"
)

// Broker is a private mosquitto started by a test on a free loopback port.
// It can be stopped and started again on the same port (and, when
// persistent, with the same persistence file), e.g. to test reconnects and
// persistent sessions across a broker restart. The process is stopped by PID
// in t.Cleanup.
type Broker struct {
	// URL is the broker address, e.g. tcp://127.0.0.1:34567.
	URL string

	t    testing.TB
	bin  string
	dir  string
	port int
	conf string

	mu   sync.Mutex
	cmd  *exec.Cmd
	done chan struct{}
	log  *Buffer // the process writes while tests read
}

// StartMosquitto starts a private mosquitto (path from Mosquitto(t); skipped
// like the other servers when unavailable) and returns its URL and a stop
// function. With persistent, the broker keeps sessions and queued messages in
// a temporary persistence directory across a stop and start of the same
// Broker (see NewMosquitto).
func StartMosquitto(t testing.TB, persistent bool) (url string, stop func()) {
	t.Helper()
	b := NewMosquitto(t, persistent)
	return b.URL, b.Stop
}

// NewMosquitto starts a private mosquitto and returns it for Stop/Start.
func NewMosquitto(t testing.TB, persistent bool) *Broker {
	t.Helper()
	return newMosquitto(t, persistent, "")
}

// NewMosquittoWith starts a private, non-persistent mosquitto with extra
// configuration lines (e.g. "allow_anonymous false" and a password_file);
// a later allow_anonymous line overrides the default one.
func NewMosquittoWith(t testing.TB, extra string) *Broker {
	t.Helper()
	return newMosquitto(t, false, extra)
}

func newMosquitto(t testing.TB, persistent bool, extra string) *Broker {
	t.Helper()
	bin := Mosquitto(t)
	dir := t.TempDir()
	port := freePort(t)
	b := &Broker{
		URL:  fmt.Sprintf("tcp://127.0.0.1:%d", port),
		t:    t,
		bin:  bin,
		dir:  dir,
		port: port,
		conf: filepath.Join(dir, "mosquitto.conf"),
	}
	conf := fmt.Sprintf(`listener %d 127.0.0.1
allow_anonymous true
set_tcp_nodelay true
max_queued_messages 0
log_dest stderr
log_type error
log_type warning
`, port)
	if persistent {
		conf += fmt.Sprintf("persistence true\npersistence_location %s/\n", dir)
	} else {
		conf += "persistence false\n"
	}
	if os.Geteuid() == 0 {
		// As root mosquitto would drop to its own user, which cannot write
		// the persistence file in the test's private temp directory.
		conf += "user root\n"
	}
	conf += extra
	if err := os.WriteFile(b.conf, []byte(conf), 0o644); err != nil {
		t.Fatalf("testenv: write mosquitto config: %v", err)
	}
	t.Cleanup(b.Stop)
	b.Start()
	return b
}

// Start starts the broker process (again) on its port and waits until it
// accepts connections.
func (b *Broker) Start() {
	b.t.Helper()
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.cmd != nil {
		return
	}
	var lastErr error
	for attempt := 0; attempt < 3; attempt++ {
		b.log = &Buffer{}
		cmd := exec.Command(b.bin, "-c", b.conf)
		cmd.Stderr = b.log
		cmd.Stdout = b.log
		if err := cmd.Start(); err != nil {
			b.t.Fatalf("testenv: start mosquitto: %v", err)
		}
		done := make(chan struct{})
		go func() { _ = cmd.Wait(); close(done) }()
		if err := waitListening(b.port, done, 5*time.Second); err != nil {
			lastErr = fmt.Errorf("%w; log: %s", err, b.log.String())
			_ = cmd.Process.Kill()
			<-done
			time.Sleep(100 * time.Millisecond) // the port may still be held by the previous process
			continue
		}
		b.cmd, b.done = cmd, done
		return
	}
	b.t.Fatalf("testenv: mosquitto did not start on port %d: %v", b.port, lastErr)
}

// Stop stops the broker process (SIGTERM, so a persistent broker saves its
// state; SIGKILL after 5 s) and waits for it to exit. Stop is idempotent.
func (b *Broker) Stop() {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.cmd == nil {
		return
	}
	_ = b.cmd.Process.Signal(os.Interrupt)
	select {
	case <-b.done:
	case <-time.After(5 * time.Second):
		_ = b.cmd.Process.Kill()
		<-b.done
	}
	b.cmd, b.done = nil, nil
}

// Log returns what the current or last broker process wrote.
func (b *Broker) Log() string {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.log == nil {
		return ""
	}
	return b.log.String()
}

func freePort(t testing.TB) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("testenv: free port: %v", err)
	}
	port := l.Addr().(*net.TCPAddr).Port
	if err := l.Close(); err != nil {
		t.Fatalf("testenv: free port: %v", err)
	}
	return port
}

func waitListening(port int, exited <-chan struct{}, limit time.Duration) error {
	deadline := time.Now().Add(limit)
	addr := net.JoinHostPort("127.0.0.1", strconv.Itoa(port))
	for time.Now().Before(deadline) {
		select {
		case <-exited:
			return fmt.Errorf("mosquitto exited during start-up")
		default:
		}
		c, err := net.DialTimeout("tcp", addr, 200*time.Millisecond)
		if err == nil {
			_ = c.Close()
			return nil
		}
		time.Sleep(20 * time.Millisecond)
	}
	return fmt.Errorf("mosquitto not listening on %s after %s", addr, limit)
}
