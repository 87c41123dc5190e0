package mqtt

import (
	"context"
	"os"
	"os/exec"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/internal/testenv"
)

// availabilityChildEnv makes the test binary act as a gateway process that
// dials with an availability topic and then waits to be killed.
const availabilityChildEnv = "ETPULSE_TEST_AVAILABILITY_CHILD"

// TestAvailabilityChild is the child process of TestAvailabilityLastWill;
// it does nothing in a normal run.
func TestAvailabilityChild(t *testing.T) {
	topic := os.Getenv(availabilityChildEnv)
	if topic == "" {
		t.Skip("child process of TestAvailabilityLastWill only")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	_, err := Dial(ctx, Options{URL: os.Getenv("ETPULSE_TEST_MQTT"), ClientID: "avail-child-" + topic[len(topic)-8:], Availability: topic})
	require.NoError(t, err)
	time.Sleep(time.Minute) // killed by the parent long before
}

// waitPayload waits for the next retained-or-live payload on ch.
func waitPayload(t *testing.T, ch <-chan Message, want string) Message {
	t.Helper()
	deadline := time.After(15 * time.Second)
	for {
		select {
		case m := <-ch:
			if string(m.Payload) == want {
				return m
			}
		case <-deadline:
			t.Fatalf("no %q on the availability topic", want)
		}
	}
}

// TestAvailabilityLastWill: a process that dies with kill -9 leaves its
// availability topic "offline" through the broker's last will; "online"
// is published, retained, after it connects.
func TestAvailabilityLastWill(t *testing.T) {
	url := testenv.MQTT(t)
	topic := uniq(t) + "/availability"
	cmd := exec.Command(os.Args[0], "-test.run", "^TestAvailabilityChild$", "-test.count=1")
	cmd.Env = append(os.Environ(), availabilityChildEnv+"="+topic, "ETPULSE_TEST_MQTT="+url)
	require.NoError(t, cmd.Start())
	t.Cleanup(func() { _ = cmd.Process.Kill(); _ = cmd.Wait() })

	watch := dial(t, url, "watch-"+topic[len(topic)-21:len(topic)-13], func(o *Options) { o.CleanSession = true })
	ch := make(chan Message, 16)
	require.NoError(t, watch.Subscribe(topic, 1, func(m Message) { m.Ack(); ch <- m }))
	waitPayload(t, ch, AvailabilityOnline)

	require.NoError(t, cmd.Process.Kill()) // SIGKILL: no DISCONNECT reaches the broker
	m := waitPayload(t, ch, AvailabilityOffline)
	assert.Equal(t, topic, m.Topic)

	// A late subscriber finds the last word retained.
	late := dial(t, url, "late-"+topic[len(topic)-21:len(topic)-13], func(o *Options) { o.CleanSession = true })
	lch := make(chan Message, 4)
	require.NoError(t, late.Subscribe(topic, 1, func(m Message) { m.Ack(); lch <- m }))
	m = waitPayload(t, lch, AvailabilityOffline)
	assert.True(t, m.Retained, "offline is retained")
}

// TestAvailabilityClose: a clean Close says "offline" itself (the broker
// sends no will after a DISCONNECT).
func TestAvailabilityClose(t *testing.T) {
	url := testenv.MQTT(t)
	topic := uniq(t) + "/availability"
	watch := dial(t, url, "watch-"+topic[len(topic)-21:len(topic)-13], func(o *Options) { o.CleanSession = true })
	ch := make(chan Message, 16)
	require.NoError(t, watch.Subscribe(topic, 1, func(m Message) { m.Ack(); ch <- m }))
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	c, err := Dial(ctx, Options{URL: url, ClientID: "gw-" + topic[len(topic)-21:len(topic)-13], Availability: topic})
	require.NoError(t, err)
	waitPayload(t, ch, AvailabilityOnline)
	c.Close(time.Second)
	waitPayload(t, ch, AvailabilityOffline)
}
