package demo

import (
	"fmt"
	"log/slog"

	mochi "github.com/mochi-mqtt/server/v2"
	"github.com/mochi-mqtt/server/v2/listeners"
	"github.com/mochi-mqtt/server/v2/packets"
)

// StartBroker starts an embedded MQTT broker on a free 127.0.0.1 port that
// lets every client connect, publish and subscribe, and returns it with its
// tcp:// URL; the caller closes it. inline enables publishing from the
// process itself (Server.Publish).
func StartBroker(inline bool) (*mochi.Server, string, error) {
	srv := mochi.New(&mochi.Options{InlineClient: inline, Logger: slog.New(slog.DiscardHandler)})
	if err := srv.AddHook(new(allowAll), nil); err != nil {
		return nil, "", fmt.Errorf("embedded broker: %w", err)
	}
	tcp := listeners.NewTCP(listeners.Config{ID: "local", Address: "127.0.0.1:0"})
	if err := srv.AddListener(tcp); err != nil {
		return nil, "", fmt.Errorf("embedded broker: %w", err)
	}
	if err := srv.Serve(); err != nil {
		return nil, "", fmt.Errorf("embedded broker: %w", err)
	}
	return srv, "tcp://" + tcp.Address(), nil
}

// allowAll lets every client on the loopback-only embedded broker connect,
// publish and subscribe.
type allowAll struct{ mochi.HookBase }

func (h *allowAll) ID() string { return "allow-all" }

func (h *allowAll) Provides(b byte) bool {
	return b == mochi.OnConnectAuthenticate || b == mochi.OnACLCheck
}

func (h *allowAll) OnConnectAuthenticate(cl *mochi.Client, pk packets.Packet) bool { return true }

func (h *allowAll) OnACLCheck(cl *mochi.Client, topic string, write bool) bool { return true }
