package pipeline

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"time"

	"etpulse/gateway/config"
	"etpulse/gateway/vocab"
	"etpulse/hourly"
)

// num is a float64 that encodes NaN and infinities as JSON null instead of
// failing the whole record.
type num float64

// MarshalJSON encodes finite values as numbers and the rest as null.
func (n num) MarshalJSON() ([]byte, error) {
	f := float64(n)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, f, 'g', -1, 64), nil
}

// UnmarshalJSON decodes a number; null decodes as NaN.
func (n *num) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*n = num(math.NaN())
		return nil
	}
	f, err := strconv.ParseFloat(string(b), 64)
	if err != nil {
		return fmt.Errorf("decode number %q: %w", b, err)
	}
	*n = num(f)
	return nil
}

// orZero is the value, or 0 for null.
func (n num) orZero() float64 {
	if math.IsNaN(float64(n)) {
		return 0
	}
	return float64(n)
}

// recordJSON is the wire form of an hourly.Record on the results topic.
// Field names are the vocabulary's (gateway/vocab), numbers rounded to
// their quantity's precision; README.md documents them.
type recordJSON struct {
	FormatVersion int                        `json:"format_version"`
	Site          string                     `json:"site"`
	Station       string                     `json:"station"`
	Reference     hourly.Reference           `json:"reference"`
	Start         time.Time                  `json:"start"`
	End           time.Time                  `json:"end"`
	LocalStart    string                     `json:"local_start"`
	Revision      int                        `json:"revision"`
	Complete      bool                       `json:"complete"`
	ETmm          *num                       `json:"et_mm"`
	Inputs        inputsJSON                 `json:"inputs"`
	RainMM        num                        `json:"rain_mm"`
	Stats         map[hourly.Quantity]statsJ `json:"stats"`
	Result        *resultJSON                `json:"result"`
	Carry         carryJSON                  `json:"carry"`
	Flags         []string                   `json:"flags"`
	Fill          string                     `json:"fill,omitempty"`
}

type inputsJSON struct {
	AirTempC     num  `json:"air_temp_c"`
	EaKPa        num  `json:"ea_kpa"`
	Wind2MS      num  `json:"wind_2m_m_s"`
	SolarMJ      num  `json:"solar_mj_m2"`
	NetRadMJ     *num `json:"net_rad_mj_m2,omitempty"`
	SoilHeatMJ   *num `json:"soil_heat_mj_m2,omitempty"`
	LengthSecond int  `json:"length_s"`
	// SolarEstimated: solar_mj_m2 is a fill estimate, not a measurement.
	SolarEstimated bool `json:"solar_estimated,omitempty"`
}

type statsJ struct {
	Count    int `json:"count"`
	Min      num `json:"min"`
	Max      num `json:"max"`
	Mean     num `json:"mean"`
	Coverage num `json:"coverage"`
}

type carryJSON struct {
	Fcd   num       `json:"fcd"`
	From  time.Time `json:"from"`
	Valid bool      `json:"valid"`
}

type resultJSON struct {
	Reference        hourly.Reference `json:"reference"`
	Day              bool             `json:"day"`
	PressureKPa      num              `json:"pressure_kpa"`
	GammaKPaC        num              `json:"gamma_kpa_c"`
	DeltaKPaC        num              `json:"delta_kpa_c"`
	EsKPa            num              `json:"es_kpa"`
	EaKPa            num              `json:"ea_kpa"`
	VPDKPa           num              `json:"vpd_kpa"`
	SunElevationRad  num              `json:"sun_elevation_rad"`
	RaMJ             num              `json:"ra_mj_m2"`
	RsoMJ            num              `json:"rso_mj_m2"`
	RsMJ             num              `json:"rs_mj_m2"`
	SolarCapped      bool             `json:"solar_capped"`
	Wind2MS          num              `json:"wind_2m_m_s"`
	WindFloored      bool             `json:"wind_floored"`
	CarryExpired     bool             `json:"carry_expired"`
	RsRso            num              `json:"rs_rso"`
	Fcd              num              `json:"fcd"`
	FcdSource        hourly.FcdSource `json:"fcd_source"`
	RnsMJ            num              `json:"rns_mj_m2"`
	RnlMJ            num              `json:"rnl_mj_m2"`
	RnMJ             num              `json:"rn_mj_m2"`
	GMJ              num              `json:"g_mj_m2"`
	NetRadMeasured   bool             `json:"net_rad_measured"`
	SoilHeatMeasured bool             `json:"soil_heat_measured"`
	Cn               num              `json:"cn"`
	Cd               num              `json:"cd"`
	RadiationTermMM  num              `json:"rad_term_mm"`
	AeroTermMM       num              `json:"aero_term_mm"`
	ETmm             num              `json:"et_mm"`
}

func (c carryJSON) carry() hourly.Carry {
	f := float64(c.Fcd)
	if math.IsNaN(f) {
		f = 0
	}
	return hourly.Carry{Fcd: f, From: c.From, Valid: c.Valid}
}

// r rounds v to the precision of the vocabulary's quantity name.
func r(name string, v float64) num { return num(vocab.Round(name, v)) }

// rk is r for a value that is null when not computed.
func rk(name string, v float64, ok bool) num {
	if !ok {
		return num(math.NaN())
	}
	return r(name, v)
}

func toJSON(rec hourly.Record) recordJSON {
	j := recordJSON{
		FormatVersion: vocab.FormatVersion,
		Site:          rec.Site, Station: rec.Station, Reference: rec.Reference,
		Start: rec.Start.UTC(), End: rec.End.UTC(), LocalStart: rec.LocalStart,
		Revision: rec.Revision, Complete: rec.Complete,
		Inputs: inputsJSON{
			AirTempC: rk(vocab.AirTempC, rec.Inputs.AirTemp, rec.Complete), EaKPa: rk(vocab.EaKPa, rec.Inputs.Ea, rec.Complete),
			Wind2MS: rk(vocab.Wind2mMS, rec.Inputs.Wind2, rec.Complete), SolarMJ: rk(vocab.SolarMJ, rec.Inputs.Solar, rec.Complete),
			LengthSecond:   int(rec.End.Sub(rec.Start) / time.Second),
			SolarEstimated: rec.Inputs.SolarEstimated,
		},
		RainMM: r(vocab.RainMM, rec.Rain),
		Stats:  make(map[hourly.Quantity]statsJ, len(rec.Stats)),
		Carry:  carryJSON{Fcd: num(vocab.RoundFraction(rec.Carry.Fcd)), From: rec.Carry.From.UTC(), Valid: rec.Carry.Valid},
		Flags:  append([]string{}, rec.Flags...),
		Fill:   rec.Fill,
	}
	if rec.Inputs.HasNetRad {
		v := r(vocab.NetRadMJ, rec.Inputs.NetRad)
		j.Inputs.NetRadMJ = &v
	}
	if rec.Inputs.HasSoilHeat {
		v := r(vocab.SoilHeatMJ, rec.Inputs.SoilHeat)
		j.Inputs.SoilHeatMJ = &v
	}
	for q, s := range rec.Stats {
		rs := func(v float64) num { return num(vocab.RoundSample(string(q), v)) }
		j.Stats[q] = statsJ{Count: s.Count, Min: rs(s.Min), Max: rs(s.Max), Mean: rs(s.Mean), Coverage: num(vocab.RoundFraction(s.Coverage))}
	}
	if res := rec.Result; res != nil {
		et := r(vocab.ETmm, res.ET)
		j.ETmm = &et
		j.Result = &resultJSON{
			Reference: res.Reference, Day: res.Day,
			PressureKPa: r(vocab.PressureKPa, res.Pressure), GammaKPaC: r(vocab.GammaKPaC, res.Gamma), DeltaKPaC: r(vocab.DeltaKPaC, res.Delta),
			EsKPa: r(vocab.EsKPa, res.Es), EaKPa: r(vocab.EaKPa, res.Ea), VPDKPa: r(vocab.VPDKPa, res.VPD),
			SunElevationRad: r(vocab.SunElevationRad, res.SunElevation), RaMJ: r(vocab.RaMJ, res.Ra), RsoMJ: r(vocab.RsoMJ, res.Rso),
			RsMJ: r(vocab.RsMJ, res.Rs), SolarCapped: res.SolarCapped, Wind2MS: r(vocab.Wind2mMS, res.Wind2), WindFloored: res.WindFloored,
			CarryExpired: res.CarryExpired,
			RsRso:        r(vocab.RsRso, res.RsRso), Fcd: r(vocab.Fcd, res.Fcd), FcdSource: res.FcdSource,
			RnsMJ: r(vocab.RnsMJ, res.Rns), RnlMJ: r(vocab.RnlMJ, res.Rnl), RnMJ: r(vocab.RnMJ, res.Rn), GMJ: r(vocab.GMJ, res.G),
			NetRadMeasured: res.NetRadMeasured, SoilHeatMeasured: res.SoilHeatMeasured,
			Cn: r(vocab.Cn, res.Cn), Cd: r(vocab.Cd, res.Cd),
			RadiationTermMM: r(vocab.RadTermMM, res.RadiationTerm), AeroTermMM: r(vocab.AeroTermMM, res.AerodynamicTerm),
			ETmm: et,
		}
	}
	return j
}

func (j recordJSON) record() hourly.Record {
	rec := hourly.Record{
		Site: j.Site, Station: j.Station, Reference: j.Reference,
		Start: j.Start.UTC(), End: j.End.UTC(), LocalStart: j.LocalStart,
		Revision: j.Revision, Complete: j.Complete,
		Inputs: hourly.Hour{
			Start: j.Start.UTC(), Length: time.Duration(j.Inputs.LengthSecond) * time.Second,
			SolarEstimated: j.Inputs.SolarEstimated,
			AirTemp:        j.Inputs.AirTempC.orZero(), Ea: j.Inputs.EaKPa.orZero(),
			Wind2: j.Inputs.Wind2MS.orZero(), Solar: j.Inputs.SolarMJ.orZero(),
		},
		Rain:  float64(j.RainMM),
		Stats: make(map[hourly.Quantity]hourly.Stats, len(j.Stats)),
		Carry: j.Carry.carry(),
		Flags: append([]string(nil), j.Flags...),
		Fill:  j.Fill,
	}
	if j.Inputs.NetRadMJ != nil {
		rec.Inputs.NetRad, rec.Inputs.HasNetRad = float64(*j.Inputs.NetRadMJ), true
	}
	if j.Inputs.SoilHeatMJ != nil {
		rec.Inputs.SoilHeat, rec.Inputs.HasSoilHeat = float64(*j.Inputs.SoilHeatMJ), true
	}
	for q, s := range j.Stats {
		rec.Stats[q] = hourly.Stats{Count: s.Count, Min: float64(s.Min), Max: float64(s.Max), Mean: float64(s.Mean), Coverage: float64(s.Coverage)}
	}
	if r := j.Result; r != nil {
		rec.Result = &hourly.Result{
			Reference: r.Reference, Day: r.Day,
			Pressure: float64(r.PressureKPa), Gamma: float64(r.GammaKPaC), Delta: float64(r.DeltaKPaC),
			Es: float64(r.EsKPa), Ea: float64(r.EaKPa), VPD: float64(r.VPDKPa),
			SunElevation: float64(r.SunElevationRad), Ra: float64(r.RaMJ), Rso: float64(r.RsoMJ),
			Rs: float64(r.RsMJ), SolarCapped: r.SolarCapped, Wind2: float64(r.Wind2MS), WindFloored: r.WindFloored,
			CarryExpired: r.CarryExpired,
			RsRso:        float64(r.RsRso), Fcd: float64(r.Fcd), FcdSource: r.FcdSource,
			Rns: float64(r.RnsMJ), Rnl: float64(r.RnlMJ), Rn: float64(r.RnMJ), G: float64(r.GMJ),
			NetRadMeasured: r.NetRadMeasured, SoilHeatMeasured: r.SoilHeatMeasured,
			Cn: float64(r.Cn), Cd: float64(r.Cd),
			RadiationTerm: float64(r.RadiationTermMM), AerodynamicTerm: float64(r.AeroTermMM),
			ET: float64(r.ETmm),
		}
	}
	return rec
}

// MarshalRecord encodes a record as the JSON published on the results topic
// (field list in README.md, "Hourly records over MQTT"), each number
// rounded to its quantity's precision.
func MarshalRecord(rec hourly.Record) ([]byte, error) {
	b, err := json.Marshal(toJSON(rec))
	if err != nil {
		return nil, fmt.Errorf("encode record %s/%s %s: %w", rec.Site, rec.Station, rec.Start.Format(time.RFC3339), err)
	}
	return b, nil
}

// UnmarshalRecord decodes a record published by MarshalRecord (its numbers
// as rounded there).
func UnmarshalRecord(b []byte) (hourly.Record, error) {
	var j recordJSON
	if err := json.Unmarshal(b, &j); err != nil {
		return hourly.Record{}, fmt.Errorf("decode record: %w", err)
	}
	return j.record(), nil
}

// DefaultTopicPrefix is the first level of every topic the gateway publishes
// when the configuration names none (topic_prefix).
const DefaultTopicPrefix = config.DefaultTopicPrefix
