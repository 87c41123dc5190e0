// Package ingest turns MQTT sensor payloads into normalised readings: it
// routes a topic to its configured sensor, decodes the payload (bare number,
// JSON value, JSON object of several fields, SenML pack), converts units to
// the canonical units of package hourly and checks physical ranges. Every
// unusable part of a message becomes a Rejection with a reason and an error
// naming the problem; the usable parts of the same message still pass.
package ingest

import (
	"fmt"
	"time"

	"etpulse/gateway/config"
	"etpulse/hourly"
)

// Reading is one decoded, normalised sample for one station.
type Reading struct {
	Site, Station string
	// Sample holds the value in the canonical unit of its quantity; for rain
	// it is an increment in mm unless Counter is set.
	Sample hourly.Sample
	// Counter marks a cumulative rain counter: Sample.Value is the counter
	// reading in mm (not an increment). The caller turns consecutive counter
	// readings into increments with CounterIncrement.
	Counter bool
	// Rollover is, for Counter readings, the counter value (in mm, like
	// Sample.Value) at which the counter wraps to zero; 0 when it never wraps.
	Rollover float64
	// ArrivalStamped marks a reading whose message carried no time of its
	// own (a number payload, a JSON payload without its time key, a SenML
	// record with a relative or no time): Sample.Time is the arrival time,
	// not the station's clock.
	ArrivalStamped bool
	// Arrived is the gateway clock when the message carrying the reading
	// arrived, for a reading stored later than that (from the journal);
	// zero means the clock of the call that stores it.
	Arrived time.Time
}

// Reason classifies why (part of) a message was not used. The values are
// stable: they are metric label values.
type Reason string

// The rejection reasons.
const (
	ReasonUnparseable  Reason = "unparseable"   // payload is not valid for the sensor's format
	ReasonUnknownField Reason = "unknown_field" // a field or SenML record the config does not map
	ReasonUnitMismatch Reason = "unit_mismatch" // a payload unit that is not valid for the quantity
	ReasonOutOfRange   Reason = "out_of_range"  // a value outside the physical range of its quantity
	ReasonTooLarge     Reason = "too_large"     // payload larger than broker.max_payload_bytes
	ReasonUnknownTopic Reason = "unknown_topic" // no sensor is configured for the topic
	// ReasonTooOld is for readings older than the late window; the pipeline
	// decides it with its clock.
	ReasonTooOld Reason = "too_old"
	// ReasonTooFuture is for readings further ahead than the station's
	// max_future; the pipeline decides it with its clock.
	ReasonTooFuture Reason = "too_future"
)

// Reasons lists every Reason in a stable order (for pre-creating metric series).
var Reasons = []Reason{
	ReasonUnparseable, ReasonUnknownField, ReasonUnitMismatch, ReasonOutOfRange,
	ReasonTooLarge, ReasonUnknownTopic, ReasonTooOld, ReasonTooFuture,
}

// Rejection is one unusable message or part of a message.
type Rejection struct {
	Reason  Reason
	Site    string // empty for unknown_topic
	Station string // empty for unknown_topic
	Sensor  string // sample sensor name (e.g. "mast" or "mast.temp_c"); empty for unknown_topic
	Err     error  // names the problem: field, quantity, value
}

func (r Rejection) Error() string {
	if r.Sensor == "" {
		return fmt.Sprintf("%s: %v", r.Reason, r.Err)
	}
	return fmt.Sprintf("%s: %s/%s/%s: %v", r.Reason, r.Site, r.Station, r.Sensor, r.Err)
}

// binding is what the router knows about one topic.
type binding struct {
	site, station string
	sensor        *config.Sensor  // in the configuration the router was built from
	ignore        map[string]bool // nil when the sensor ignores no key
	// names holds each channel key of a fields or SenML sensor with its
	// Sample.Sensor, built once (see sampleName); readings is the number
	// of channels, the capacity of a message's readings.
	names    map[string]keyName
	readings int
}

// keyName is a channel key and the Sample.Sensor of its readings.
type keyName struct{ key, name string }

// Router maps MQTT topics to configured sensors and decodes their payloads.
// It is immutable after NewRouter and safe for concurrent use.
type Router struct {
	topics     map[string]*binding
	filters    []string
	maxPayload int
}

// NewRouter builds a router for every sensor of every station in cfg. The
// configuration must have been validated (config.Load/Parse do); the
// router refers to its sensors, so it must not change afterwards.
func NewRouter(cfg *config.Config) (*Router, error) {
	r := &Router{topics: map[string]*binding{}, maxPayload: cfg.Broker.MaxPayloadBytes}
	if r.maxPayload <= 0 {
		r.maxPayload = config.DefaultMaxPayloadBytes
	}
	for _, site := range cfg.Sites {
		for _, st := range site.Stations {
			for k := range st.Sensors {
				sn := &st.Sensors[k]
				if sn.Topic == "" {
					return nil, fmt.Errorf("new router: site %s station %s sensor %s: empty topic", site.ID, st.ID, sn.ID)
				}
				if prev, ok := r.topics[sn.Topic]; ok {
					return nil, fmt.Errorf("new router: topic %q used by %s/%s/%s and %s/%s/%s",
						sn.Topic, prev.site, prev.station, prev.sensor.ID, site.ID, st.ID, sn.ID)
				}
				b := &binding{site: site.ID, station: st.ID, sensor: sn}
				for _, k := range sn.Ignore {
					if b.ignore == nil {
						b.ignore = map[string]bool{}
					}
					b.ignore[k] = true
				}
				chans := sn.Channels()
				b.readings = max(1, len(chans))
				if sn.Format == config.FormatFields || sn.Format == config.FormatSenML {
					b.names = make(map[string]keyName, len(chans))
					for k := range chans {
						b.names[k] = keyName{key: k, name: sn.ChannelName(k)}
					}
				}
				r.topics[sn.Topic] = b
				r.filters = append(r.filters, sn.Topic)
			}
		}
	}
	return r, nil
}

// Filters returns the topics to subscribe to, in configuration order.
func (r *Router) Filters() []string { return append([]string(nil), r.filters...) }

// Route decodes one message. Timestamps come from the payload when it has
// them, else arrival. A message may yield several readings and several
// rejections at once.
func (r *Router) Route(topic string, payload []byte, arrival time.Time) ([]Reading, []Rejection) {
	b, ok := r.topics[topic]
	if !ok {
		return nil, []Rejection{{Reason: ReasonUnknownTopic, Err: fmt.Errorf("no sensor is configured for topic %q", truncate(topic, 200))}}
	}
	if len(payload) > r.maxPayload {
		return nil, []Rejection{b.reject(b.sensor.ID, ReasonTooLarge,
			fmt.Errorf("payload of %d bytes exceeds max_payload_bytes %d", len(payload), r.maxPayload))}
	}
	d := decoding{b: b, arrival: arrival, readings: make([]Reading, 0, b.readings)}
	switch b.sensor.Format {
	case config.FormatNumber:
		d.number(payload)
	case config.FormatJSON:
		d.json(payload)
	case config.FormatFields:
		d.fields(payload)
	case config.FormatSenML:
		d.senml(payload)
	default:
		d.rejectAll(ReasonUnparseable, fmt.Errorf("sensor format %q is not supported", b.sensor.Format))
	}
	if len(d.readings) == 0 {
		return nil, d.rejections
	}
	return d.readings, d.rejections
}

func (b *binding) reject(sensor string, reason Reason, err error) Rejection {
	return Rejection{Reason: reason, Site: b.site, Station: b.station, Sensor: sensor, Err: err}
}

// sampleName is the Sample.Sensor of a channel: the sensor id for the
// single-value formats, "<sensor>.<key>" for fields and SenML records, so
// that every quantity of a multi-quantity payload deduplicates on its own.
func (b *binding) sampleName(key string) string {
	if kn, ok := b.names[key]; ok {
		return kn.name
	}
	return b.sensor.ChannelName(key)
}

// decoding accumulates the result of one Route call.
type decoding struct {
	b          *binding
	arrival    time.Time
	readings   []Reading
	rejections []Rejection
}

func (d *decoding) rejectAll(reason Reason, err error) {
	d.rejections = append(d.rejections, d.b.reject(d.b.sensor.ID, reason, err))
}

func (d *decoding) rejectKey(key string, reason Reason, err error) {
	d.rejections = append(d.rejections, d.b.reject(d.b.sampleName(key), reason, err))
}

// emit converts v (in unit) for the channel under key and appends the
// reading, or a rejection.
// stamp is a reading's time and whether it is the arrival time (or relative
// to it) rather than one the message carried.
type stamp struct {
	t         time.Time
	byArrival bool
}

func (d *decoding) emit(key string, ch config.Channel, unit string, v float64, at stamp) {
	rd, reason, err := normalise(ch, unit, v)
	if err != nil {
		if key != "" {
			err = fmt.Errorf("%s: %w", key, err)
		}
		d.rejectKey(key, reason, err)
		return
	}
	rd.Site, rd.Station = d.b.site, d.b.station
	rd.Sample.Sensor = d.b.sampleName(key)
	rd.Sample.Time, rd.ArrivalStamped = at.t, at.byArrival
	d.readings = append(d.readings, rd)
}

func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n] + "..."
}
