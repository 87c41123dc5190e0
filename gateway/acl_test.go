package gateway_test

import (
	"bufio"
	"context"
	"crypto/tls"
	"crypto/x509"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/mqtt"
)

// The shipped broker files and the configuration whose topics the ACL is
// written for.
const (
	shippedBrokerConf = "../deploy/mosquitto-farm.conf"
	shippedACL        = "../deploy/mosquitto-farm.acl"
	shippedExample    = "../deploy/etpulse.example.yaml"
)

// aclWait bounds every wait for a message that must arrive (common
// practice, no source: loopback deliveries take milliseconds).
const aclWait = 10 * time.Second

// TestShippedBrokerACL starts mosquitto with the shipped configuration and
// ACL (only ports, file and certificate paths rewritten) and proves, over
// TLS, who may publish and read what: a station's login cannot publish a
// report, a hold, a water request, a command or a record, nor clear a
// retained alert; a valve controller cannot command any valve nor read
// another zone's commands; the operator cannot command a valve; the gateway
// reads the sensors and publishes records, commands and alerts. A refused
// publish is acknowledged by mosquitto 2.x but delivered to nobody, so each
// refusal is proven by an allowed control message, published after it on
// the same connection, reaching the gateway first.
func TestShippedBrokerACL(t *testing.T) {
	cfg, err := config.Load(shippedExample)
	require.NoError(t, err)
	prefix := cfg.Prefix()
	site := &cfg.Sites[0]
	station := &site.Stations[0]
	require.GreaterOrEqual(t, len(site.Zones), 2)
	zoneA, zoneB := &site.Zones[0], &site.Zones[1]
	cmdA, cmdB := zoneA.CommandTopicIn(prefix, site.ID), zoneB.CommandTopicIn(prefix, site.ID)
	reportA, reportB := zoneA.ReportTopicIn(prefix, site.ID), zoneB.ReportTopicIn(prefix, site.ID)
	sensorTopic := station.Sensors[0].Topic
	hold, water := config.HoldTopic(prefix, site.ID), config.WaterTopic(prefix, site.ID)
	record := config.RecordTopic(prefix, site.ID, station.ID)
	alertTopic := config.AlertTopic(cfg.Alerts.TopicPrefix, site.ID, station.ID, station.Sensors[0].ID, "air_temp", "stuck")

	users := []string{"etpulse", "operator", station.ID, zoneA.ID, zoneB.ID}
	url, ca := startShippedBroker(t, users)

	gw := aclDial(t, url, ca, "etpulse")
	sensor := aclDial(t, url, ca, station.ID)
	ctrlA := aclDial(t, url, ca, zoneA.ID)
	op := aclDial(t, url, ca, "operator")

	// The gateway sees everything it may read: the sensors and its prefix.
	seen := newInbox()
	require.NoError(t, gw.Subscribe(strings.SplitN(sensorTopic, "/", 2)[0]+"/#", 1, seen.add))

	refused := func(name string, c *mqtt.Client, topic string, retained bool, payload, control string) {
		t.Helper()
		require.NoError(t, aclPublish(c, topic, retained, payload), "%s: mosquitto acknowledges a refused publish", name)
		marker := fmt.Sprintf("control after %s", name)
		require.NoError(t, aclPublish(c, control, false, marker), name)
		require.True(t, seen.wait(control, marker), "%s: the control message on %s did not arrive", name, control)
		assert.False(t, seen.has(topic, payload), "%s: %s was delivered", name, topic)
	}

	// A station's login: only its own sensor topics.
	forgedReport := `{"id":"` + zoneA.ID + `-forged","state":"finished","volume_l":1e15}`
	refused("station report", sensor, reportA, false, forgedReport, sensorTopic)
	refused("station hold", sensor, hold, false, `{"id":"x","action":"hold"}`, sensorTopic)
	refused("station water", sensor, water, false, `{"id":"x","zone":"`+zoneA.ID+`","kind":"applied","mm":50,"who":"x","why":"x"}`, sensorTopic)
	refused("station command", sensor, cmdA, false, `{"id":"forged","minutes":600}`, sensorTopic)
	refused("station record", sensor, record, false, `{"forged":true}`, sensorTopic)

	// A retained critical alert the station's login tries to clear.
	const alertBody = `{"severity":"critical","text":"air temperature stuck"}`
	require.NoError(t, aclPublish(gw, alertTopic, true, alertBody))
	require.True(t, seen.wait(alertTopic, alertBody))
	refused("station alert clear", sensor, alertTopic, true, "", sensorTopic)
	fresh := newInbox()
	require.NoError(t, aclDial(t, url, ca, "etpulse").Subscribe(alertTopic, 1, fresh.add))
	assert.True(t, fresh.wait(alertTopic, alertBody), "the retained alert is still there")

	// A valve controller: its report topic only; no command anywhere.
	refused("controller commands another valve", ctrlA, cmdB, false, `{"id":"forged-b","minutes":600}`, reportA)
	refused("controller commands its own valve", ctrlA, cmdA, false, `{"id":"forged-a","minutes":600}`, reportA)
	refused("controller reports for another zone", ctrlA, reportB, false, `{"id":"x","state":"finished"}`, reportA)
	// It reads its own commands, not another zone's.
	mine := newInbox()
	_ = ctrlA.Subscribe(cmdB, 1, mine.add) // mosquitto may refuse the subscription or just deliver nothing
	require.NoError(t, ctrlA.Subscribe(cmdA, 1, mine.add))
	require.NoError(t, aclPublish(gw, cmdB, false, `{"id":"b-1"}`))
	require.NoError(t, aclPublish(gw, cmdA, false, `{"id":"a-1"}`))
	require.True(t, mine.wait(cmdA, `{"id":"a-1"}`), "the gateway commands the controller's own valve")
	assert.False(t, mine.has(cmdB, `{"id":"b-1"}`), "a controller read another zone's command")

	// The operator: holds and water requests, no commands.
	refused("operator command", op, cmdA, false, `{"id":"op-1","minutes":600}`, hold)
	require.NoError(t, aclPublish(op, water, false, `{"id":"w"}`))
	assert.True(t, seen.wait(water, `{"id":"w"}`), "the operator's water request reaches the gateway")

	// The gateway publishes records; the operator reads them.
	opIn := newInbox()
	require.NoError(t, op.Subscribe(record, 1, opIn.add))
	require.NoError(t, aclPublish(gw, record, false, `{"et_mm":0.42}`))
	assert.True(t, opIn.wait(record, `{"et_mm":0.42}`))

	// No anonymous logins, not even over TLS.
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	anon, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: "acl-anonymous", CleanSession: true, TLS: &tls.Config{RootCAs: ca}, ConnectTimeout: 3 * time.Second})
	if err == nil {
		anon.Close(time.Second)
	}
	assert.Error(t, err, "an anonymous login was accepted")
}

// startShippedBroker runs mosquitto on 127.0.0.1 with the shipped
// configuration, rewriting only its listener ports (both bound to
// 127.0.0.1), file paths (password file, the shipped ACL itself,
// persistence directory, log to stderr) and certificate paths (a PKI made
// here). users get the password "pw-<user>". It returns the TLS listener's
// URL and the CA pool that checks the broker; the process is stopped by PID
// at cleanup.
func startShippedBroker(t *testing.T, users []string) (string, *x509.CertPool) {
	t.Helper()
	bin := testenv.Mosquitto(t)
	pki := testenv.NewPKI(t)
	dir := t.TempDir()
	var pw strings.Builder
	for _, u := range users {
		b, err := os.ReadFile(testenv.PasswordFile(t, u, "pw-"+u))
		require.NoError(t, err)
		pw.Write(b)
	}
	pwFile := filepath.Join(dir, "passwd")
	require.NoError(t, os.WriteFile(pwFile, []byte(pw.String()), 0o644))
	acl, err := filepath.Abs(shippedACL)
	require.NoError(t, err)

	plainPort, tlsPort := aclFreePort(t), aclFreePort(t)
	rewrite := map[string]string{
		"listener 1883":        fmt.Sprintf("listener %d 127.0.0.1", plainPort),
		"listener 8883":        fmt.Sprintf("listener %d 127.0.0.1", tlsPort),
		"certfile":             "certfile " + pki.ServerCert,
		"keyfile":              "keyfile " + pki.ServerKey,
		"cafile":               "cafile " + pki.CAFile,
		"password_file":        "password_file " + pwFile,
		"acl_file":             "acl_file " + acl,
		"persistence_location": "persistence_location " + dir + "/",
		"log_dest":             "log_dest stderr",
	}
	raw, err := os.ReadFile(shippedBrokerConf)
	require.NoError(t, err)
	var out strings.Builder
	found := map[string]bool{}
	directives := map[string]string{}
	sc := bufio.NewScanner(strings.NewReader(string(raw)))
	for sc.Scan() {
		line := sc.Text()
		f := strings.Fields(line)
		if len(f) == 0 || strings.HasPrefix(f[0], "#") {
			continue
		}
		directives[f[0]] = strings.Join(f[1:], " ")
		key := f[0]
		if key == "listener" && len(f) > 1 {
			key += " " + f[1]
		}
		if r, ok := rewrite[key]; ok {
			if !found[key] || key == "log_dest" {
				out.WriteString(r + "\n")
			}
			found[key] = true
			continue
		}
		out.WriteString(line + "\n")
	}
	for k := range rewrite {
		require.True(t, found[k], "the shipped broker configuration has no %q line", k)
	}
	// What the shipped configuration must say, beside what is rewritten.
	assert.Equal(t, "false", directives["allow_anonymous"])
	assert.NotEmpty(t, directives["persistent_client_expiration"])
	assert.Contains(t, string(raw), "listener 1883 127.0.0.1\n", "the plain listener is bound to loopback")
	if os.Geteuid() == 0 {
		// As root mosquitto drops to its own user, which cannot read this
		// test's private temporary directory.
		out.WriteString("user root\n")
	}
	conf := filepath.Join(dir, "mosquitto.conf")
	require.NoError(t, os.WriteFile(conf, []byte(out.String()), 0o644))

	logFile, err := os.Create(filepath.Join(dir, "mosquitto.log"))
	require.NoError(t, err)
	defer logFile.Close() // the process keeps its own descriptor
	brokerLog := func() string { b, _ := os.ReadFile(logFile.Name()); return string(b) }
	cmd := exec.Command(bin, "-c", conf)
	cmd.Stdout, cmd.Stderr = logFile, logFile
	require.NoError(t, cmd.Start())
	done := make(chan struct{})
	go func() { _ = cmd.Wait(); close(done) }()
	t.Cleanup(func() {
		_ = cmd.Process.Signal(os.Interrupt)
		select {
		case <-done:
		case <-time.After(5 * time.Second):
			_ = cmd.Process.Kill()
			<-done
		}
		if t.Failed() {
			t.Logf("mosquitto log:\n%s", brokerLog())
		}
	})
	pool := x509.NewCertPool()
	caPEM, err := os.ReadFile(pki.CAFile)
	require.NoError(t, err)
	require.True(t, pool.AppendCertsFromPEM(caPEM))
	url := fmt.Sprintf("ssl://127.0.0.1:%d", tlsPort)
	deadline := time.Now().Add(aclWait)
	for {
		select {
		case <-done:
			t.Fatalf("mosquitto exited during start-up: %s", brokerLog())
		default:
		}
		conn, err := tls.Dial("tcp", fmt.Sprintf("127.0.0.1:%d", tlsPort), &tls.Config{RootCAs: pool})
		if err == nil {
			_ = conn.Close()
			return url, pool
		}
		if time.Now().After(deadline) {
			t.Fatalf("mosquitto not listening on TLS port %d: %v; log: %s", tlsPort, err, brokerLog())
		}
		time.Sleep(20 * time.Millisecond)
	}
}

func aclFreePort(t *testing.T) int {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	require.NoError(t, err)
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port
}

// aclDial logs in as user over TLS with a clean session.
func aclDial(t *testing.T, url string, ca *x509.CertPool, user string) *mqtt.Client {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), aclWait)
	defer cancel()
	c, err := mqtt.Dial(ctx, mqtt.Options{URL: url, ClientID: fmt.Sprintf("acl-%s-%d", user, time.Now().UnixNano()),
		Username: user, Password: "pw-" + user, CleanSession: true, TLS: &tls.Config{RootCAs: ca}})
	require.NoError(t, err, "login as %s", user)
	t.Cleanup(func() { c.Close(time.Second) })
	return c
}

func aclPublish(c *mqtt.Client, topic string, retained bool, payload string) error {
	ctx, cancel := context.WithTimeout(context.Background(), aclWait)
	defer cancel()
	return c.Publish(ctx, topic, 1, retained, []byte(payload))
}

// inbox keeps every message a subscription received.
type inbox struct {
	mu   sync.Mutex
	msgs map[string][]string
	more chan struct{}
}

func newInbox() *inbox { return &inbox{msgs: map[string][]string{}, more: make(chan struct{}, 1)} }

func (b *inbox) add(m mqtt.Message) {
	b.mu.Lock()
	b.msgs[m.Topic] = append(b.msgs[m.Topic], string(m.Payload))
	b.mu.Unlock()
	m.Ack()
	select {
	case b.more <- struct{}{}:
	default:
	}
}

func (b *inbox) has(topic, payload string) bool {
	b.mu.Lock()
	defer b.mu.Unlock()
	for _, p := range b.msgs[topic] {
		if p == payload {
			return true
		}
	}
	return false
}

// wait reports whether payload arrives on topic within aclWait.
func (b *inbox) wait(topic, payload string) bool {
	limit := time.After(aclWait)
	for !b.has(topic, payload) {
		select {
		case <-b.more:
		case <-limit:
			return false
		}
	}
	return true
}
