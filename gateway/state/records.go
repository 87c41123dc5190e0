package state

import (
	"encoding/json"
	"fmt"
	"math"
	"strconv"
	"time"

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

// known is v, or null (NaN) when the value was not computed.
func known(v float64, ok bool) num {
	if !ok {
		return num(math.NaN())
	}
	return num(v)
}

// orZero is the value, or 0 for null.
func (n num) orZero() float64 {
	if math.IsNaN(float64(n)) {
		return 0
	}
	return float64(n)
}

// Record is how the state file keeps an hourly.Record (closed hours in
// pipeline/<site>/<station>/hours, records not yet handed on in
// pipeline.pending), schema version 2. It is the persistence form, apart
// from the MQTT record the pipeline publishes: the two may change
// independently; a change here bumps Version.
type Record struct {
	Site       string                          `json:"site"`
	Station    string                          `json:"station"`
	Reference  hourly.Reference                `json:"reference"`
	Start      time.Time                       `json:"start"`
	End        time.Time                       `json:"end"`
	LocalStart string                          `json:"local_start"`
	Revision   int                             `json:"revision"`
	Complete   bool                            `json:"complete"`
	ETmm       *num                            `json:"et_mm"`
	Inputs     RecordInputs                    `json:"inputs"`
	RainMM     num                             `json:"rain_mm"`
	Stats      map[hourly.Quantity]RecordStats `json:"stats"`
	Result     *RecordResult                   `json:"result"`
	Carry      Carry                           `json:"carry"`
	Flags      []string                        `json:"flags"`
	Fill       string                          `json:"fill,omitempty"`
}

// RecordInputs are the hour's aggregated inputs (null when not computed).
type RecordInputs struct {
	AirTempC     num  `json:"air_temp_c"`
	EaKPa        num  `json:"ea_kpa"`
	Wind2MS      num  `json:"wind2_m_s"`
	SolarMJ      num  `json:"solar_mj_m2"`
	NetRadMJ     *num `json:"net_rad_mj_m2,omitempty"`
	SoilHeatMJ   *num `json:"soil_heat_mj_m2,omitempty"`
	LengthSecond int  `json:"length_s"`
	// SolarEstimated: solar_mj_m2 is a fill estimate, not a measurement.
	SolarEstimated bool `json:"solar_estimated,omitempty"`
}

// RecordStats summarise one quantity's samples.
type RecordStats struct {
	Count    int `json:"count"`
	Min      num `json:"min"`
	Max      num `json:"max"`
	Mean     num `json:"mean"`
	Coverage num `json:"coverage"`
}

// Carry is a night cloudiness carry.
type Carry struct {
	Fcd   num       `json:"fcd"`
	From  time.Time `json:"from"`
	Valid bool      `json:"valid"`
}

// RecordResult is the computation with every intermediate.
type RecordResult struct {
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
	Wind2MS          num              `json:"wind2_m_s"`
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
	RadiationTermMM  num              `json:"radiation_term_mm"`
	AeroTermMM       num              `json:"aerodynamic_term_mm"`
	ETmm             num              `json:"et_mm"`
}

// CarryOf converts a night cloudiness carry to its persistence form.
func CarryOf(c hourly.Carry) Carry {
	return Carry{Fcd: num(c.Fcd), From: c.From.UTC(), Valid: c.Valid}
}

// Hourly converts the carry back to the domain type.
func (c Carry) Hourly() hourly.Carry {
	f := float64(c.Fcd)
	if math.IsNaN(f) {
		f = 0
	}
	return hourly.Carry{Fcd: f, From: c.From, Valid: c.Valid}
}

// RecordOf converts a record to its persistence form.
func RecordOf(rec hourly.Record) Record {
	j := Record{
		Site: rec.Site, Station: rec.Station, Reference: rec.Reference,
		Start: rec.Start.UTC(), End: rec.End.UTC(), LocalStart: rec.LocalStart,
		Revision: rec.Revision, Complete: rec.Complete,
		Inputs: RecordInputs{
			AirTempC: known(rec.Inputs.AirTemp, rec.Complete), EaKPa: known(rec.Inputs.Ea, rec.Complete),
			Wind2MS: known(rec.Inputs.Wind2, rec.Complete), SolarMJ: known(rec.Inputs.Solar, rec.Complete),
			LengthSecond:   int(rec.End.Sub(rec.Start) / time.Second),
			SolarEstimated: rec.Inputs.SolarEstimated,
		},
		RainMM: num(rec.Rain),
		Stats:  make(map[hourly.Quantity]RecordStats, len(rec.Stats)),
		Carry:  CarryOf(rec.Carry),
		Flags:  append([]string{}, rec.Flags...),
		Fill:   rec.Fill,
	}
	if rec.Inputs.HasNetRad {
		v := num(rec.Inputs.NetRad)
		j.Inputs.NetRadMJ = &v
	}
	if rec.Inputs.HasSoilHeat {
		v := num(rec.Inputs.SoilHeat)
		j.Inputs.SoilHeatMJ = &v
	}
	for q, s := range rec.Stats {
		j.Stats[q] = RecordStats{Count: s.Count, Min: num(s.Min), Max: num(s.Max), Mean: num(s.Mean), Coverage: num(s.Coverage)}
	}
	if r := rec.Result; r != nil {
		et := num(r.ET)
		j.ETmm = &et
		j.Result = &RecordResult{
			Reference: r.Reference, Day: r.Day,
			PressureKPa: num(r.Pressure), GammaKPaC: num(r.Gamma), DeltaKPaC: num(r.Delta),
			EsKPa: num(r.Es), EaKPa: num(r.Ea), VPDKPa: num(r.VPD),
			SunElevationRad: num(r.SunElevation), RaMJ: num(r.Ra), RsoMJ: num(r.Rso),
			RsMJ: num(r.Rs), SolarCapped: r.SolarCapped, Wind2MS: num(r.Wind2), WindFloored: r.WindFloored,
			CarryExpired: r.CarryExpired,
			RsRso:        num(r.RsRso), Fcd: num(r.Fcd), FcdSource: r.FcdSource,
			RnsMJ: num(r.Rns), RnlMJ: num(r.Rnl), RnMJ: num(r.Rn), GMJ: num(r.G),
			NetRadMeasured: r.NetRadMeasured, SoilHeatMeasured: r.SoilHeatMeasured,
			Cn: num(r.Cn), Cd: num(r.Cd),
			RadiationTermMM: num(r.RadiationTerm), AeroTermMM: num(r.AerodynamicTerm),
			ETmm: num(r.ET),
		}
	}
	return j
}

// Hourly converts the stored record back to the domain type.
func (j Record) Hourly() hourly.Record {
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
		Carry: j.Carry.Hourly(),
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

// EncodeRecord is the stored bytes of a record.
func EncodeRecord(rec hourly.Record) ([]byte, error) {
	b, err := json.Marshal(RecordOf(rec))
	if err != nil {
		return nil, fmt.Errorf("encode record %s/%s %s: %w", rec.Site, rec.Station, rec.Start.Format(time.RFC3339), err)
	}
	return b, nil
}

// DecodeRecord reads a record stored by EncodeRecord.
func DecodeRecord(b []byte) (hourly.Record, error) {
	var j Record
	if err := json.Unmarshal(b, &j); err != nil {
		return hourly.Record{}, fmt.Errorf("decode stored record: %w", err)
	}
	return j.Hourly(), nil
}
