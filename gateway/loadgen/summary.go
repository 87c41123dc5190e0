package loadgen

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"runtime"
	"runtime/metrics"
	"runtime/pprof"
	"sort"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"etpulse/gateway"
)

// Summary is the result of a load run. Durations are in milliseconds and
// sizes in bytes in the JSON form.
type Summary struct {
	Broker     string  `json:"broker"` // "embedded" or the broker URL
	Stations   int     `json:"stations"`
	Publishers int     `json:"publishers"`
	IntervalS  float64 `json:"interval_s"` // simulated seconds between readings of a sensor
	StoppedBy  string  `json:"stopped_by"` // messages, duration, signal or error

	Published   int64              `json:"messages_published"` // acknowledged by the broker
	InjectedBad int64              `json:"messages_injected_bad"`
	Acked       int64              `json:"messages_acked"`   // acknowledged by the gateway after storing them
	Handled     int64              `json:"messages_handled"` // taken by the gateway (stored or rejected)
	Unmatched   int64              `json:"acks_unmatched"`   // acknowledgements of no known publication (redeliveries)
	Rejected    map[string]float64 `json:"rejected"`         // by reason
	Duplicates  float64            `json:"readings_duplicate"`

	PublishSeconds float64 `json:"publish_seconds"` // from the first publication to the last
	AckSeconds     float64 `json:"ack_seconds"`     // from the first publication to the last acknowledgement
	MsgPerSecond   float64 `json:"msg_per_s"`       // acknowledged messages / AckSeconds

	AckP50Ms    float64 `json:"ack_latency_p50_ms"` // publication to durable acknowledgement
	AckP99Ms    float64 `json:"ack_latency_p99_ms"`
	AckMaxMs    float64 `json:"ack_latency_max_ms"`
	RecordP50Ms float64 `json:"record_latency_p50_ms"` // closing reading acknowledged by the gateway (the hour closed) to hour record published
	RecordP99Ms float64 `json:"record_latency_p99_ms"`

	SimHours        float64        `json:"simulated_hours"` // simulated time covered by the readings
	HoursClosed     int            `json:"hours_closed"`    // first emissions, all stations
	HoursExpected   int            `json:"hours_expected"`  // hours the published readings close
	HoursPerStation map[string]int `json:"hours_per_station"`
	Revisions       int            `json:"revisions"`
	Incomplete      int            `json:"records_incomplete"`
	SilenceClosed   int            `json:"records_closed_by_silence"`
	Records         uint64         `json:"records_published"` // by the gateway, first emissions and revisions
	RecordsEmitted  uint64         `json:"records_committed"`
	AlertsRaised    float64        `json:"alerts_raised"`
	OutboxDepth     float64        `json:"outbox_depth"` // points not yet accepted by a store, at the end

	// Hour close for all stations: over the hour ends every station closed,
	// the time from the gateway taking the last station's closing reading to
	// the last station's record published.
	HoursAllStations int     `json:"hours_closed_all_stations"`
	HourCloseP50Ms   float64 `json:"hour_close_all_stations_p50_ms"`
	HourCloseMaxMs   float64 `json:"hour_close_all_stations_max_ms"`

	// Bytes written by the process from the first publication to the end of
	// draining (/proc/self/io; only the gateway writes to disk in a run):
	// write_bytes reached the storage layer, wchar went to write calls.
	WriteBytes           uint64  `json:"write_bytes"`
	WriteBytesPerMsg     float64 `json:"write_bytes_per_msg"`
	WriteCallBytes       uint64  `json:"write_call_bytes"`
	WriteCallBytesPerMsg float64 `json:"write_call_bytes_per_msg"`

	// Bare is the floor measured before the gateway started; nil when
	// skipped. RatioToBare is MsgPerSecond over the floor's msg/s.
	Bare        *BareSummary `json:"bare,omitempty"`
	RatioToBare float64      `json:"ratio_to_bare,omitempty"`

	CPUSeconds    float64 `json:"cpu_seconds"`     // process user+system CPU from the first publication to the end of draining; 0 where unavailable
	CPUPerMsgUs   float64 `json:"cpu_us_per_msg"`  // CPUSeconds per acknowledged message, whole process
	PeakHeapBytes uint64  `json:"peak_heap_bytes"` // live heap objects, sampled every 100 ms
	PeakRSSBytes  uint64  `json:"peak_rss_bytes"`  // VmHWM of the whole process; 0 where unavailable
	// PeakRSSGatewayOnly says the peak was reset when the gateway phase
	// began (so it is not the bare phase's); false: since the process began.
	PeakRSSGatewayOnly bool `json:"peak_rss_reset_at_gateway_phase"`
	// PeakRSSAnonBytes and PeakRSSFileBytes split the resident memory
	// (RssAnon, RssFile of /proc/self/status, each the peak of samples
	// every 100 ms over the gateway phase): anonymous is the Go heap,
	// stacks and runtime; file-backed is the binary and the pages of the
	// state file that bbolt maps and has touched. 0 where unavailable.
	PeakRSSAnonBytes uint64 `json:"peak_rss_anon_bytes"`
	PeakRSSFileBytes uint64 `json:"peak_rss_file_bytes"`
	GCCycles         uint32 `json:"gc_cycles"`

	Consistent bool     `json:"consistent"`         // Check passed
	Problems   []string `json:"problems,omitempty"` // what Check found
}

// collect fills the summary once publishing has stopped and the gateway has
// caught up.
func (s *Summary) collect(o Options, f *farm, tr *tracker, g *gateway.Gateway, reg prometheus.Gatherer, pubs []*publisher, began, publishing time.Duration) {
	s.Stations, s.Publishers, s.IntervalS = o.Stations, o.Publishers, o.Interval.Seconds()
	lastTick := map[int]int{}
	for _, p := range pubs {
		s.Published += p.sent.Load()
		s.InjectedBad += p.bad.Load()
	}
	tr.mu.Lock()
	for i, ps := range tr.pubs {
		lastTick[i] = ps.lastTick
	}
	s.Acked, s.Unmatched = tr.acked, tr.unmatched
	if tr.acked > 0 {
		s.AckSeconds = (tr.lastAck - began).Seconds()
	}
	s.AckP50Ms, s.AckP99Ms = ms(tr.ackLat.quantile(0.50)), ms(tr.ackLat.quantile(0.99))
	s.AckMaxMs = ms(tr.ackLat.max)
	s.RecordP50Ms, s.RecordP99Ms = ms(tr.recLat.quantile(0.50)), ms(tr.recLat.quantile(0.99))
	s.HoursPerStation = map[string]int{}
	for i, st := range f.stations {
		s.HoursClosed += tr.hours[i]
		s.HoursPerStation[st.id] = tr.hours[i]
		last := lastTick[st.idx%len(pubs)]
		s.HoursExpected += f.hoursClosed(st, last)
		if last >= 0 {
			s.SimHours = max(s.SimHours, f.readingTime(st, last).Sub(SimStart).Hours())
		}
	}
	s.Revisions, s.Incomplete, s.SilenceClosed = tr.revisions, tr.incomplete, tr.silenced
	var p50, worst time.Duration
	s.HoursAllStations, p50, worst = tr.hourCloses()
	s.HourCloseP50Ms, s.HourCloseMaxMs = ms(p50), ms(worst)
	tr.mu.Unlock()

	s.PublishSeconds = publishing.Seconds()
	if s.AckSeconds > 0 {
		s.MsgPerSecond = float64(s.Acked) / s.AckSeconds
	}
	if s.Bare != nil && s.Bare.MsgPerSecond > 0 {
		s.RatioToBare = s.MsgPerSecond / s.Bare.MsgPerSecond
	}
	s.Handled = int64(g.Handled())
	s.Records, s.RecordsEmitted = g.Published(), g.Emitted()
	s.Rejected = map[string]float64{}
	sumMetric(reg, "etpulse_messages_rejected_total", func(labels map[string]string, v float64) {
		s.Rejected[labels["reason"]] += v
	})
	sumMetric(reg, "etpulse_readings_duplicate_total", func(_ map[string]string, v float64) { s.Duplicates += v })
	sumMetric(reg, "etpulse_alerts_raised_total", func(_ map[string]string, v float64) { s.AlertsRaised += v })
	sumMetric(reg, "etpulse_outbox_depth", func(_ map[string]string, v float64) { s.OutboxDepth += v })
}

// written fills in the bytes written between two readings of the
// process's counters.
func (s *Summary) written(a, b ioCounters) {
	if !a.ok || !b.ok {
		return
	}
	s.WriteBytes, s.WriteCallBytes = b.writeBytes-a.writeBytes, b.wchar-a.wchar
	if s.Acked > 0 {
		s.WriteBytesPerMsg = float64(s.WriteBytes) / float64(s.Acked)
		s.WriteCallBytesPerMsg = float64(s.WriteCallBytes) / float64(s.Acked)
	}
}

func ms(d time.Duration) float64 { return float64(d.Microseconds()) / 1000 }

// sumMetric calls fn with the labels and value of every sample of the
// counter or gauge named name.
func sumMetric(g prometheus.Gatherer, name string, fn func(labels map[string]string, v float64)) {
	mfs, err := g.Gather()
	if err != nil {
		return
	}
	for _, mf := range mfs {
		if mf.GetName() != name {
			continue
		}
		for _, m := range mf.GetMetric() {
			labels := map[string]string{}
			for _, l := range m.GetLabel() {
				labels[l.GetName()] = l.GetValue()
			}
			switch {
			case m.Counter != nil:
				fn(labels, m.GetCounter().GetValue())
			case m.Gauge != nil:
				fn(labels, m.GetGauge().GetValue())
			}
		}
	}
}

func (s *Summary) memory(m *memory) {
	s.PeakHeapBytes = m.peak.Load()
	s.PeakRSSBytes = peakRSS()
	s.PeakRSSAnonBytes, s.PeakRSSFileBytes = m.peakAnon.Load(), m.peakFile.Load()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	s.PeakHeapBytes = max(s.PeakHeapBytes, ms.HeapAlloc)
	s.GCCycles = ms.NumGC
}

// Check reports every inconsistency of the run: a published message the
// gateway did not acknowledge, rejections other than the injected ones,
// hours not closed or closed twice, records not published.
func (s *Summary) Check() error {
	var errs []error
	bad := func(format string, args ...any) { errs = append(errs, fmt.Errorf(format, args...)) }
	if s.Acked != s.Published {
		bad("gateway acknowledged %d of %d published messages", s.Acked, s.Published)
	}
	if s.Handled != s.Published {
		bad("gateway handled %d of %d published messages", s.Handled, s.Published)
	}
	if s.Unmatched != 0 {
		bad("%d acknowledgements matched no publication (redelivered messages)", s.Unmatched)
	}
	var rejected float64
	for _, v := range s.Rejected {
		rejected += v
	}
	if rejected != float64(s.InjectedBad) {
		bad("gateway rejected %.0f messages (%s), %d were injected malformed", rejected, s.rejectedText(), s.InjectedBad)
	}
	if s.Duplicates != 0 {
		bad("%.0f readings counted as duplicates", s.Duplicates)
	}
	if s.HoursClosed != s.HoursExpected {
		bad("hours closed %d, expected %d (the published readings close that many)", s.HoursClosed, s.HoursExpected)
	}
	if s.Revisions != 0 || s.SilenceClosed != 0 || s.Incomplete != 0 {
		bad("revisions %d, hours closed by silence %d, incomplete hours %d: want none", s.Revisions, s.SilenceClosed, s.Incomplete)
	}
	if s.Records != s.RecordsEmitted || s.Records != uint64(s.HoursClosed+s.Revisions) {
		bad("records published %d, committed %d, hours closed %d", s.Records, s.RecordsEmitted, s.HoursClosed)
	}
	if s.Bare != nil && s.Bare.Received != s.Bare.Published {
		bad("bare subscriber received %d of %d published messages", s.Bare.Received, s.Bare.Published)
	}
	return errors.Join(errs...)
}

func (s *Summary) rejectedText() string {
	if len(s.Rejected) == 0 {
		return "none"
	}
	keys := make([]string, 0, len(s.Rejected))
	for k := range s.Rejected {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = fmt.Sprintf("%s %.0f", k, s.Rejected[k])
	}
	return strings.Join(parts, ", ")
}

// WriteText writes the summary as plain text.
func (s *Summary) WriteText(w io.Writer) error {
	var b bytes.Buffer
	p := func(format string, args ...any) { fmt.Fprintf(&b, format+"\n", args...) }
	p("broker            %s", s.Broker)
	p("stations          %d (%d publishing connections, a reading every %gs simulated), stopped by %s", s.Stations, s.Publishers, s.IntervalS, s.StoppedBy)
	p("published         %d messages in %.2fs (%d malformed on purpose)", s.Published, s.PublishSeconds, s.InjectedBad)
	p("acknowledged      %d durable, %d handled, %d unmatched; rejected: %s", s.Acked, s.Handled, s.Unmatched, s.rejectedText())
	p("throughput        %.0f msg/s sustained (acknowledged / %.2fs from first publication to last acknowledgement)", s.MsgPerSecond, s.AckSeconds)
	p("ack latency       p50 %.2f ms, p99 %.2f ms, max %.2f ms (publication to durable acknowledgement)", s.AckP50Ms, s.AckP99Ms, s.AckMaxMs)
	if s.HoursClosed > 0 {
		p("record latency    p50 %.2f ms, p99 %.2f ms (closing reading acknowledged by the gateway to hour record published)", s.RecordP50Ms, s.RecordP99Ms)
	} else {
		p("record latency    n/a (no hour closed)")
	}
	if s.HoursAllStations > 0 {
		p("hour close        p50 %.2f s, max %.2f s for all %d stations (last station's closing reading taken to last record published; %d hours)",
			s.HourCloseP50Ms/1000, s.HourCloseMaxMs/1000, s.Stations, s.HoursAllStations)
	} else {
		p("hour close        n/a (no hour closed at every station)")
	}
	p("hours             %d closed (expected %d) over %.1f simulated hours; revisions %d, incomplete %d, closed by silence %d",
		s.HoursClosed, s.HoursExpected, s.SimHours, s.Revisions, s.Incomplete, s.SilenceClosed)
	p("records           %d published (%d committed); alerts raised %.0f; outbox depth at the end %.0f", s.Records, s.RecordsEmitted, s.AlertsRaised, s.OutboxDepth)
	rss := "n/a"
	if s.PeakRSSBytes > 0 {
		rss = mib(s.PeakRSSBytes)
	}
	if s.CPUSeconds > 0 {
		p("cpu               %.2fs user+system, %.1f µs per message (this process: publishers and gateway%s)", s.CPUSeconds, s.CPUPerMsgUs, s.embeddedNote())
	}
	since := "since the process began"
	if s.PeakRSSGatewayOnly {
		since = "during the gateway phase"
	}
	p("memory            peak heap %s, peak RSS %s %s (this process: publishers and gateway%s), %d GC cycles", mib(s.PeakHeapBytes), rss, since, s.embeddedNote(), s.GCCycles)
	if s.PeakRSSAnonBytes > 0 {
		p("resident          anonymous up to %s (heap, stacks, runtime), file-backed up to %s (the binary and the state file's mapped pages)", mib(s.PeakRSSAnonBytes), mib(s.PeakRSSFileBytes))
	}
	if s.WriteCallBytes > 0 || s.WriteBytes > 0 {
		p("written           %.0f B per message to storage (write_bytes %s), %.0f B per message in write calls (wchar %s)",
			s.WriteBytesPerMsg, mib(s.WriteBytes), s.WriteCallBytesPerMsg, mib(s.WriteCallBytes))
	}
	if b := s.Bare; b != nil {
		p("bare subscriber   %d of %d messages in %.2fs, %.0f msg/s, %.1f µs CPU per message (publishers and bare subscriber), p99 %.2f ms, peak heap %s",
			b.Received, b.Published, b.Seconds, b.MsgPerSecond, b.CPUPerMsgUs, b.AckP99Ms, mib(b.PeakHeapBytes))
		cpu := "n/a"
		if b.CPUPerMsgUs > 0 && s.CPUPerMsgUs > 0 {
			cpu = fmt.Sprintf("%.2f× the CPU per message (%+.1f µs)", s.CPUPerMsgUs/b.CPUPerMsgUs, s.CPUPerMsgUs-b.CPUPerMsgUs)
		}
		p("gateway / bare    %.2f× the rate, %s; same broker, publishers, topics and QoS 1", s.RatioToBare, cpu)
	}
	if err := s.Check(); s.StoppedBy == "signal" {
		p("consistency       not checked: interrupted before the gateway caught up")
	} else if err != nil {
		p("consistency       FAILED:")
		for _, line := range strings.Split(err.Error(), "\n") {
			p("  - %s", line)
		}
	} else {
		p("consistency       ok: every published message acknowledged, rejections = injected, records = hours closed")
	}
	_, err := w.Write(b.Bytes())
	return err
}

func (s *Summary) embeddedNote() string {
	if s.Broker == "embedded" {
		return ", and the embedded broker"
	}
	return ""
}

func mib(n uint64) string { return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20)) }

// memory samples the live heap and the resident memory (anonymous and
// file-backed) every 100 ms and keeps their peaks.
type memory struct {
	peak     atomic.Uint64
	peakAnon atomic.Uint64
	peakFile atomic.Uint64
	// With capture set, profile holds a heap profile taken when the heap
	// was last sampled 10 % above the previous profile's (so at its peak,
	// give or take 10 %), profileErr the error of writing one.
	capture    bool
	profile    bytes.Buffer
	profileErr error
	done       chan struct{}
	once       sync.Once
	wg         sync.WaitGroup
}

const heapMetric = "/memory/classes/heap/objects:bytes"

func startMemory(capture bool) *memory {
	m := &memory{done: make(chan struct{}), capture: capture}
	var profiled uint64
	m.wg.Add(1)
	go func() {
		defer m.wg.Done()
		sample := []metrics.Sample{{Name: heapMetric}}
		t := time.NewTicker(100 * time.Millisecond)
		defer t.Stop()
		for {
			metrics.Read(sample)
			if sample[0].Value.Kind() == metrics.KindUint64 {
				v := sample[0].Value.Uint64()
				storeMax(&m.peak, v)
				if m.capture && m.profileErr == nil && v > profiled+profiled/10 {
					m.profile.Reset()
					m.profileErr = pprof.WriteHeapProfile(&m.profile)
					profiled = v
				}
			}
			anon, file := residentSplit()
			storeMax(&m.peakAnon, anon)
			storeMax(&m.peakFile, file)
			select {
			case <-m.done:
				return
			case <-t.C:
			}
		}
	}()
	return m
}

func (m *memory) stop() {
	m.once.Do(func() { close(m.done) })
	m.wg.Wait()
}

// peakRSS returns the process's peak resident set size (VmHWM), or 0 where
// /proc/self/status is unavailable.
func peakRSS() uint64 { return procStatus("VmHWM:") }

func currentRSS() uint64 { return procStatus("VmRSS:") }

// storeMax stores v in p when it is larger (one writer).
func storeMax(p *atomic.Uint64, v uint64) {
	if v > p.Load() {
		p.Store(v)
	}
}

// residentSplit returns the process's anonymous and file-backed resident
// bytes (RssAnon, RssFile), 0 where /proc/self/status is unavailable.
func residentSplit() (anon, file uint64) {
	return procStatus("RssAnon:"), procStatus("RssFile:")
}

func procStatus(key string) uint64 {
	f, err := os.Open("/proc/self/status")
	if err != nil {
		return 0
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := sc.Text()
		if !strings.HasPrefix(line, key) {
			continue
		}
		fields := strings.Fields(line[len(key):])
		if len(fields) == 0 {
			return 0
		}
		kb, err := strconv.ParseUint(fields[0], 10, 64)
		if err != nil {
			return 0
		}
		return kb << 10
	}
	return 0
}

// progress writes a line every interval while publishing.
type progress struct {
	done chan struct{}
	wg   sync.WaitGroup
}

func startProgress(w io.Writer, every time.Duration, tr *tracker, g *gateway.Gateway, m *memory) *progress {
	p := &progress{done: make(chan struct{})}
	if w == nil || every <= 0 {
		return p
	}
	p.wg.Add(1)
	go func() {
		defer p.wg.Done()
		t := time.NewTicker(every)
		defer t.Stop()
		var lastAcked int64
		last := tr.since()
		for {
			select {
			case <-p.done:
				return
			case <-t.C:
			}
			tr.mu.Lock()
			acked, outstanding := tr.acked, tr.outstanding
			hours := 0
			for _, h := range tr.hours {
				hours += h
			}
			tr.mu.Unlock()
			now := tr.since()
			rate := float64(acked-lastAcked) / (now - last).Seconds()
			lastAcked, last = acked, now
			fmt.Fprintf(w, "%6.1fs  acknowledged %d (%.0f msg/s), waiting %d, hours closed %d, records published %d, peak heap %s, rss %s\n",
				now.Seconds(), acked, rate, outstanding, hours, g.Published(), mib(m.peak.Load()), mib(currentRSS()))
		}
	}()
	return p
}

func (p *progress) stop() {
	select {
	case <-p.done:
	default:
		close(p.done)
	}
	p.wg.Wait()
}
