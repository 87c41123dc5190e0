// Package replay runs recorded readings through the live pipeline offline:
// the same hour bins, closing rules and computation as the gateway, with a
// temporary state file and no broker.
//
// Input is CSV with a header row naming the columns time, station, quantity,
// value and unit (any order, extra columns ignored):
//
//	time                  RFC 3339 timestamp of the reading
//	station               station id, or site/station when ids repeat across sites
//	quantity              air_temp, rel_humidity, dew_point, vapour_pressure,
//	                      wind, solar, rain, net_rad or soil_heat
//	value                 decimal number
//	unit                  a unit accepted for the quantity (hourly.UnitsFor),
//	                      e.g. degC, degF, %, kPa, m/s, km/h, W/m2, mm, in
//	sensor                optional: the sensor name as the live gateway gives
//	                      it (sensor id, or id.key); empty or absent means the
//	                      station's first configured sensor of the quantity
//
// The readings go through the live gateway's checks without publishing: the
// drift and fault monitor sees each reading at its own time, and its quality
// gate flags, excludes (filling an excluded pyranometer's hour by
// Hargreaves-Samani) or stops hours exactly as live.
//
// With Options.Zones (a zone backtest) the file may also hold rows for the
// zones (zonerows.go): meter rows (station = the meter, quantity
// meter_flow, meter_total or meter_pulses) and forecast rows (station =
// the site, quantity forecast, value = the forecast topic's JSON); probe
// rows are ordinary soil_water or soil_tension readings.
//
// Rain values are increments (fallen since the previous row of the station).
// Rows of one quantity and station deduplicate on time. Output is one CSV row
// per hourly record (Columns), revisions as extra rows.
package replay

import (
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"go.etcd.io/bbolt"

	gwclock "etpulse/gateway/clock"
	"etpulse/gateway/config"
	"etpulse/gateway/hourcsv"
	"etpulse/gateway/ingest"
	"etpulse/gateway/pipeline"
	"etpulse/gateway/quality"
	"etpulse/gateway/state"
	"etpulse/hourly"
)

// Options configure a replay.
type Options struct {
	// Logger receives the pipeline's logs, among them the readings it
	// rejects (a few per reason and minute of reading time, then a count,
	// as in the live gateway); nil discards.
	Logger *slog.Logger
	// StatePath is the state file to use; empty means a temporary one that is
	// removed afterwards.
	StatePath string
	// Handlers see every record inside its closing transaction, as in the
	// live gateway (e.g. the zone balance).
	Handlers []pipeline.HourHandler
	// OnRecord is called with each record after it is written.
	OnRecord func(hourly.Record)
	// Progress, when set, is called with the input bytes consumed so far.
	Progress func(n int64)
	// MaxRowErrors stops the replay after this many bad rows; 0 means 1000.
	MaxRowErrors int
	// RowErrors receives one line per bad row (line number and problem); nil discards.
	RowErrors io.Writer
	// Zones, when set, sees every accepted station reading and takes the
	// meter and forecast rows (a zone backtest); without it those rows are
	// bad rows.
	Zones ZoneFeed
}

// Summary counts what a replay did.
type Summary struct {
	Rows, Accepted, Duplicates, BadRows int
	Rejected                            map[ingest.Reason]int
	Records, Revisions, Complete        int
}

// Columns is the header of the records CSV.
var Columns = []string{
	"site", "station", "reference", "start_utc", "end_utc", "local_start", "revision", "complete",
	"air_temp_c", "ea_kpa", "wind_2m_m_s", "solar_mj_m2", "rain_mm",
	"ra_mj_m2", "rso_mj_m2", "rn_mj_m2", "g_mj_m2", "fcd", "fcd_source", "et_mm", "flags", "fill",
}

const batchRows = 2000

// Run replays the readings CSV in through the pipeline for cfg and writes
// the records CSV to out.
func Run(ctx context.Context, cfg *config.Config, in io.Reader, out io.Writer, o Options) (sum Summary, err error) {
	if o.Logger == nil {
		o.Logger = slog.New(slog.DiscardHandler)
	}
	if o.MaxRowErrors <= 0 {
		o.MaxRowErrors = 1000
	}
	if o.RowErrors == nil {
		o.RowErrors = io.Discard
	}
	sum.Rejected = map[ingest.Reason]int{}
	path := o.StatePath
	if path == "" {
		dir, err := os.MkdirTemp("", "etpulse-replay-")
		if err != nil {
			return sum, fmt.Errorf("replay: %w", err)
		}
		defer os.RemoveAll(dir)
		path = filepath.Join(dir, "state.db")
	}
	db, err := state.Open(path)
	if err != nil {
		return sum, fmt.Errorf("replay: %w", err)
	}
	defer func() {
		if cerr := db.Close(); cerr != nil && err == nil {
			err = fmt.Errorf("replay: close state: %w", cerr)
		}
	}()
	// The pipeline and the alert monitor are built at the first reading, so
	// the monitor's clock starts where the readings do, as a live gateway's
	// starts when it is switched on.
	var (
		p     *pipeline.Pipeline
		mon   *quality.Monitor
		clock time.Time // the replay's clock: the latest reading time of the batch being ingested
	)
	start := func(first time.Time) error {
		clock = first
		var err error
		p, mon, err = newLive(cfg, db, o, func() time.Time { return clock })
		return err
	}

	cr := &countingReader{r: in}
	r := csv.NewReader(cr)
	r.FieldsPerRecord = -1
	r.ReuseRecord = true
	w := csv.NewWriter(out)
	if err := w.Write(Columns); err != nil {
		return sum, fmt.Errorf("replay: write: %w", err)
	}
	rows, err := newRowReader(r, cfg, o.Zones != nil)
	if err != nil {
		return sum, fmt.Errorf("replay: %w", err)
	}
	emit := func(recs []hourly.Record) error {
		for _, rec := range recs {
			if err := w.Write(recordRow(rec)); err != nil {
				return fmt.Errorf("replay: write: %w", err)
			}
			sum.Records++
			if rec.Revision > 0 {
				sum.Revisions++
			} else if rec.Complete {
				sum.Complete++
			}
			if o.OnRecord != nil {
				o.OnRecord(rec)
			}
		}
		w.Flush()
		return w.Error()
	}
	// Batches hold consecutive rows of one station, so the clock (the
	// station's latest reading time) suits files sorted by time or by station.
	latest := map[string]time.Time{}
	var batch []ingest.Reading
	batchKey := ""
	flush := func() error {
		if len(batch) == 0 {
			return nil
		}
		if p == nil {
			if err := start(batch[0].Sample.Time); err != nil {
				return fmt.Errorf("replay: %w", err)
			}
		}
		clock = latest[batchKey]
		res, err := p.Ingest(clock, batch)
		batch = batch[:0]
		if err != nil {
			return fmt.Errorf("replay: %w", err)
		}
		if err := mon.Sync(); err != nil {
			return fmt.Errorf("replay: %w", err)
		}
		sum.Accepted += res.Accepted
		sum.Duplicates += res.Duplicates
		// The pipeline logs rejected readings through Logger, at the
		// bounded rate of the live gateway; here they are only counted.
		for _, rj := range res.Rejected {
			sum.Rejected[rj.Reason]++
		}
		if err := emit(res.Records); err != nil {
			return err
		}
		revs, err := p.Revise()
		if err != nil {
			return fmt.Errorf("replay: %w", err)
		}
		if err := emit(revs); err != nil {
			return err
		}
		if o.Progress != nil {
			o.Progress(cr.n)
		}
		return nil
	}
	for {
		if err := ctx.Err(); err != nil {
			return sum, err
		}
		rd, zr, line, err := rows.next()
		if errors.Is(err, io.EOF) {
			break
		}
		var rowErr *rowError
		if errors.As(err, &rowErr) {
			sum.Rows++
			sum.BadRows++
			fmt.Fprintf(o.RowErrors, "line %d: %v\n", line, rowErr.err)
			if sum.BadRows >= o.MaxRowErrors {
				return sum, fmt.Errorf("replay: stopped after %d bad rows (last at line %d: %v)", sum.BadRows, line, rowErr.err)
			}
			continue
		}
		if err != nil {
			return sum, fmt.Errorf("replay: line %d: %w", line, err)
		}
		sum.Rows++
		if zr != nil {
			// The station rows before it go through first: the zones see
			// the file in its order.
			if err := flush(); err != nil {
				return sum, err
			}
			if err := zr.feed(o.Zones); err != nil {
				return sum, fmt.Errorf("replay: line %d: %w", line, err)
			}
			continue
		}
		key := rd.Site + "/" + rd.Station
		if key != batchKey || len(batch) >= batchRows {
			if err := flush(); err != nil {
				return sum, err
			}
			batchKey = key
		}
		if rd.Sample.Time.After(latest[key]) {
			latest[key] = rd.Sample.Time
		}
		batch = append(batch, rd)
	}
	if err := flush(); err != nil {
		return sum, err
	}
	if p != nil {
		recs, err := p.Flush()
		if err != nil {
			return sum, fmt.Errorf("replay: %w", err)
		}
		if err := emit(recs); err != nil {
			return sum, err
		}
		if err := mon.Sync(); err != nil {
			return sum, fmt.Errorf("replay: %w", err)
		}
	}
	if o.Progress != nil {
		o.Progress(cr.n)
	}
	return sum, nil
}

// newLive builds the pipeline as the live gateway composes it, without
// publishing: the drift and fault monitor observes every reading, runs the
// hour-level checks inside each closing transaction and is the quality gate
// (so an excluded pyranometer's hour is filled here as it is live), then
// the caller's handlers. The monitor sees each reading arrive at its own
// time, as it would have live.
func newLive(cfg *config.Config, db *bbolt.DB, o Options, clock func() time.Time) (*pipeline.Pipeline, *quality.Monitor, error) {
	mon, err := quality.New(quality.Options{Config: cfg, DB: db, Logger: o.Logger.With("component", "alerts"), Clock: gwclock.Func(clock)})
	if err != nil {
		return nil, nil, err
	}
	po := pipeline.Options{DB: db, Logger: o.Logger, Handlers: o.Handlers}
	if o.Zones != nil {
		po.Observers = append(po.Observers, o.Zones) // probe readings
	}
	if !cfg.Alerts.Disabled {
		arrived := pipeline.SampleObserverFunc(func(site, station string, s hourly.Sample, _ time.Time) {
			mon.ObserveSample(site, station, s, s.Time)
		})
		po.Observers = append(po.Observers, arrived)
		po.Handlers = append([]pipeline.HourHandler{mon}, o.Handlers...)
		po.Gate = mon
	}
	p, err := pipeline.New(cfg, po)
	if err != nil {
		return nil, nil, err
	}
	return p, mon, nil
}

type countingReader struct {
	r io.Reader
	n int64
}

func (c *countingReader) Read(b []byte) (int, error) {
	n, err := c.r.Read(b)
	c.n += int64(n)
	return n, err
}

// rowError is a bad input row; the replay counts it and goes on.
type rowError struct{ err error }

func (e *rowError) Error() string { return e.err.Error() }

type stationRef struct{ site, station string }

// rowReader turns CSV rows into readings.
type rowReader struct {
	r        *csv.Reader
	col      map[string]int
	stations map[string]stationRef // "station" (when unique) and "site/station"
	// sensors names each station's first configured sensor of a quantity
	// as the live gateway names its readings (sensor id, or id.key), so the
	// alert checks see the sensors they expect.
	sensors map[stationRef]map[hourly.Quantity]string
	// zones is set when a zone backtest takes the meter and forecast
	// rows; meters and sites index them.
	zones    bool
	meters   map[string]meterRef
	meterIDs []string
	sites    map[string]bool
}

func newRowReader(r *csv.Reader, cfg *config.Config, zones bool) (*rowReader, error) {
	head, err := r.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, errors.New("readings csv: empty input, want a header row")
		}
		return nil, fmt.Errorf("readings csv: header: %w", err)
	}
	rr := &rowReader{r: r, col: map[string]int{}, stations: map[string]stationRef{}, zones: zones}
	rr.indexMeters(cfg)
	for i, h := range head {
		rr.col[strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))] = i
	}
	for _, c := range []string{"time", "station", "quantity", "value", "unit"} {
		if _, ok := rr.col[c]; !ok {
			return nil, fmt.Errorf("readings csv: header %q lacks column %q (want time, station, quantity, value, unit)", strings.Join(head, ","), c)
		}
	}
	count := map[string]int{}
	rr.sensors = map[stationRef]map[hourly.Quantity]string{}
	for _, site := range cfg.Sites {
		for _, st := range site.Stations {
			count[st.ID]++
			ref := stationRef{site.ID, st.ID}
			rr.stations[site.ID+"/"+st.ID] = ref
			names := map[hourly.Quantity]string{}
			for _, sensor := range st.Sensors {
				channels := sensor.Channels()
				for _, k := range config.SortedKeys(channels) {
					if _, ok := names[channels[k].Quantity]; !ok {
						names[channels[k].Quantity] = sensor.ChannelName(k)
					}
				}
			}
			rr.sensors[ref] = names
		}
	}
	for _, site := range cfg.Sites {
		for _, st := range site.Stations {
			if count[st.ID] == 1 {
				rr.stations[st.ID] = stationRef{site.ID, st.ID}
			}
		}
	}
	return rr, nil
}

// next returns the next reading or row for the zones, a *rowError for a
// bad row, or io.EOF.
func (rr *rowReader) next() (ingest.Reading, *zoneRow, int, error) {
	rec, err := rr.r.Read()
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			return ingest.Reading{}, nil, pe.StartLine, &rowError{err}
		}
		return ingest.Reading{}, nil, 0, err
	}
	line, _ := rr.r.FieldPos(0)
	get := func(c string) string {
		i := rr.col[c]
		if i >= len(rec) {
			return ""
		}
		return strings.TrimSpace(rec[i])
	}
	bad := func(format string, args ...any) (ingest.Reading, *zoneRow, int, error) {
		return ingest.Reading{}, nil, line, &rowError{fmt.Errorf(format, args...)}
	}
	at, err := time.Parse(time.RFC3339Nano, get("time"))
	if err != nil {
		return bad("time: %q is not an RFC 3339 time", get("time"))
	}
	if q := get("quantity"); isZoneQuantity(q) {
		if !rr.zones {
			return bad("%s: rows for the zones need a zone backtest (etpulse replay with zones in the configuration); skipped", q)
		}
		zr, err := rr.zoneRow(q, at.UTC(), get)
		if err != nil {
			return bad("%v", err)
		}
		return ingest.Reading{}, zr, line, nil
	}
	ref, ok := rr.stations[get("station")]
	if !ok {
		return bad("station: %q is not in the configuration (use site/station when ids repeat)", get("station"))
	}
	q := hourly.Quantity(get("quantity"))
	rng, known := ingest.PhysicalRanges[q]
	if !known {
		return bad("quantity: %q is not one of %v", q, hourly.Quantities)
	}
	raw, err := strconv.ParseFloat(get("value"), 64)
	if err != nil {
		return bad("value: %q is %v", get("value"), hourcsv.NotANumber(get("value"), true))
	}
	v, err := hourly.ToCanonical(q, get("unit"), raw)
	if err != nil {
		return bad("%s: unit %q is not one of %v, or value %q is not finite", q, get("unit"), hourly.UnitsFor(q), get("value"))
	}
	if v < rng.Min || v > rng.Max {
		return bad("%s: %g %s outside %g..%g %s", q, raw, get("unit"), rng.Min, rng.Max, hourly.CanonicalUnit(q))
	}
	sensor := get("sensor")
	if _, ok := rr.col["sensor"]; !ok || sensor == "" {
		sensor = rr.sensors[ref][q]
	}
	if sensor == "" {
		sensor = "csv." + string(q)
	}
	return ingest.Reading{Site: ref.site, Station: ref.station, Sample: hourly.Sample{
		Sensor: sensor, Quantity: q, Time: at.UTC(), Value: v,
	}}, nil, line, nil
}

func recordRow(rec hourly.Record) []string {
	f := func(v float64) string { return strconv.FormatFloat(v, 'f', 4, 64) }
	row := []string{
		rec.Site, rec.Station, string(rec.Reference),
		rec.Start.UTC().Format(time.RFC3339), rec.End.UTC().Format(time.RFC3339), rec.LocalStart,
		strconv.Itoa(rec.Revision), strconv.FormatBool(rec.Complete),
	}
	// The inputs of an incomplete hour are empty, as the MQTT record's are
	// null: a 0.0000 would read as a measured 0 °C, calm, dark hour.
	opt := func(v float64) string {
		if !rec.Complete {
			return ""
		}
		return f(v)
	}
	row = append(row,
		opt(rec.Inputs.AirTemp), opt(rec.Inputs.Ea), opt(rec.Inputs.Wind2), opt(rec.Inputs.Solar),
		f(rec.Rain))
	if r := rec.Result; r != nil {
		row = append(row, f(r.Ra), f(r.Rso), f(r.Rn), f(r.G), f(r.Fcd), string(r.FcdSource), f(r.ET))
	} else {
		row = append(row, "", "", "", "", "", "", "")
	}
	return append(row, strings.Join(rec.Flags, " "), rec.Fill)
}
