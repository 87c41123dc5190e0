package faults_test

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/stretchr/testify/require"

	"etpulse/gateway/demo"
	"etpulse/gateway/internal/testenv"
	"etpulse/gateway/pipeline"
)

// faultBacklogRestart uploads the stream as a logger uploads hours of old
// readings after an outage, with the configuration's default silence_close
// (20 min), and stops the gateway (SIGKILL, then SIGTERM) while it works
// through the backlog: no hour may close before its readings arrived (its
// revision 0 must equal the undisturbed run's record) and no reading may be
// refused as too old, so every hour equals the undisturbed run.
func faultBacklogRestart(t *testing.T, s *suite) result {
	sc := newScript()
	ref := s.reference(t, sc)
	b := testenv.NewMosquitto(t, false)
	rl := watchRecords(t, b.URL)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL, silenceClose: 20 * time.Minute})
	g.start()
	pub := newPublisher(t, b.URL, "faults-pub")
	// The backlog comes in three parts; the gateway is killed (then
	// stopped) at a random point of an upload and the next part is uploaded
	// after it is back: its first pass must not take the old stations for
	// silent and close their hours before their readings arrive.
	parts := chunks(sc.msgs, 3)
	trials := 0
	for i, sig := range []syscall.Signal{sigKILL, sigTERM} {
		pub.publish(t, parts[i])
		time.Sleep(time.Duration(s.rng.IntN(200)) * time.Millisecond) // a random point of the backlog
		g.signal(sig)
		trials++
		g.start()
		// The logger pauses between uploads (the fault, not a wait for an
		// event): the restarted gateway makes its first passes meanwhile.
		time.Sleep(3 * time.Second)
	}
	pub.publish(t, parts[2])
	rl.await(sc.hours(), 2*time.Second, 90*time.Second)
	require.Equal(t, 0, g.signal(sigTERM))
	got, conflicts := rl.snapshot()
	lost, phantom, detail := compareRecords(ref, got)
	early, more := rl.premature(ref)
	detail = append(detail, more...)
	d := fmt.Sprintf("hours=%d closed_early=%d", len(got), early)
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "backlog-restart", trials: trials, lost: lost + phantom + early, duplicated: conflicts, detail: d}
}

// faultTimeReadings mixes readings with bad times into the stream: a
// far-past one ({"value":20,"time":1}, a logger with an unset clock), one
// ten years ahead, one without a time key in the middle of the backlog, and
// a station clock that jumps three hours ahead for one reading. The work
// must stay bounded (the stream's hours come out within the limit, the
// state file stays small), no hour outside the stream may appear and the
// stream's hours must equal the undisturbed run, except the hour the jumped
// reading lands in, which may gain that one sample.
func faultTimeReadings(t *testing.T, s *suite) result {
	sc := newScript()
	ref := s.reference(t, sc)
	b := testenv.NewMosquitto(t, false)
	rl := watchRecords(t, b.URL)
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL})
	g.start()
	pub := newPublisher(t, b.URL, "faults-pub")
	air := sc.sim.Topic(demo.Orchard, "air")
	parts := chunks(sc.msgs, 4)
	jump := sc.start.Add(4*time.Hour + 30*time.Minute)
	inject := [][]byte{
		[]byte(`{"value":20,"time":1}`),
		[]byte(fmt.Sprintf(`{"value":20,"time":%q}`, time.Now().AddDate(10, 0, 0).UTC().Format(time.RFC3339))),
		[]byte(`{"value":20}`),
		[]byte(fmt.Sprintf(`{"value":20,"time":%q}`, jump.Format(time.RFC3339))),
	}
	began := time.Now()
	for i, part := range parts {
		pub.publish(t, part)
		pub.raw(t, air, inject[i])
	}
	hours := rl.await(sc.hours(), 2*time.Second, 60*time.Second)
	took := time.Since(began)
	require.False(t, g.exited(), "the gateway exited:\n%s", tail(g.log()))
	require.Equal(t, 0, g.signal(sigTERM))
	fi, err := os.Stat(g.state)
	require.NoError(t, err)
	got, conflicts := rl.snapshot()
	jumpKey := demo.Orchard + "/" + jump.Truncate(time.Hour).Format(time.RFC3339)
	if r, ok := got[jumpKey]; ok {
		if rr, ok := ref[jumpKey]; ok && r.Stats != nil && rr.Stats != nil {
			delete(got, jumpKey) // allowed to differ by the jumped sample
			delete(ref, jumpKey)
			defer func() { ref[jumpKey] = rr }()
		}
	}
	lost, phantom, detail := compareRecords(ref, got)
	// Bounded: 12 hours from a 6 MB state file at most (common practice,
	// no source: the undisturbed run stays under 2 MB).
	if fi.Size() > 6<<20 {
		lost++
		detail = append(detail, fmt.Sprintf("state file %d bytes", fi.Size()))
	}
	d := fmt.Sprintf("hours=%d phantom=%d state=%dKiB took=%s", hours, phantom, fi.Size()>>10, took.Round(100*time.Millisecond))
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "time-readings", trials: len(inject), lost: lost + phantom, duplicated: conflicts, detail: d}
}

// faultDiskFull runs the gateway with its state file on a small tmpfs,
// fills the disk while the stream flows, then frees it: the gateway must
// stay up, raise an alert that names the disk, and after the space is freed
// every hour must equal the undisturbed run.
func faultDiskFull(t *testing.T, s *suite) result {
	sc := newScript()
	ref := s.reference(t, sc)
	dir := filepath.Join(t.TempDir(), "disk")
	require.NoError(t, os.Mkdir(dir, 0o755))
	if err := syscall.Mount("tmpfs", dir, "tmpfs", 0, "size=8m"); err != nil {
		fmt.Printf("fault disk-full: SKIPPED (cannot mount a small tmpfs here: %v; needs root or CAP_SYS_ADMIN)\n", err)
		t.Skipf("cannot mount a small tmpfs: %v", err)
		return result{}
	}
	t.Cleanup(func() {
		if err := syscall.Unmount(dir, 0); err != nil {
			t.Errorf("unmount %s: %v", dir, err)
		}
	})
	b := testenv.NewMosquitto(t, false)
	rl := watchRecords(t, b.URL)
	alerts := watchTopics(t, b.URL, pipeline.DefaultTopicPrefix+"/#")
	g := newGW(t, s.bin, t.TempDir(), sc, cfgOptions{broker: b.URL, state: filepath.Join(dir, "state.db")})
	g.start()
	pub := newPublisher(t, b.URL, "faults-pub")
	parts := chunks(sc.msgs, 3)
	pub.publish(t, parts[0])
	rl.await(0, time.Second, 10*time.Second)
	filler := filepath.Join(dir, "filler")
	f, err := os.Create(filler)
	require.NoError(t, err)
	buf := make([]byte, 64<<10)
	for {
		if _, err := f.Write(buf); err != nil {
			require.True(t, errors.Is(err, syscall.ENOSPC), "filling the disk: %v", err)
			break
		}
	}
	f.Close()
	pub.publish(t, parts[1])
	alerted := alerts.await(func(topic, payload string) bool {
		s := strings.ToLower(topic + " " + payload)
		return strings.Contains(s, "alert") && (strings.Contains(s, "disk") || strings.Contains(s, "space"))
	}, 30*time.Second)
	up := !g.exited()
	require.NoError(t, os.Remove(filler))
	pub.publish(t, parts[2])
	rl.await(sc.hours(), 2*time.Second, 90*time.Second)
	var detail []string
	lost := 0
	if !alerted {
		lost++
		detail = append(detail, "no disk alert published")
	}
	if !up {
		lost++
		detail = append(detail, "the gateway exited while the disk was full")
	} else {
		require.Equal(t, 0, g.signal(sigTERM))
	}
	got, conflicts := rl.snapshot()
	l2, phantom, d2 := compareRecords(ref, got)
	detail = append(detail, d2...)
	d := fmt.Sprintf("hours=%d alert=%v stayed_up=%v", len(got), alerted, up)
	if len(detail) > 0 {
		d += " (" + join(detail, 6) + ")"
	}
	return result{name: "disk-full", trials: 1, lost: lost + l2 + phantom, duplicated: conflicts, detail: d}
}
