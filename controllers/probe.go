package controllers

import (
	"fmt"
	"math"
	"sort"
	"time"

	"etpulse/hourly"
)

// Retention is a van Genuchten (1980) soil water retention curve with the
// Mualem restriction m = 1 - 1/n. Water contents are volumetric, m3/m3;
// Alpha is per kPa of tension.
type Retention struct {
	ThetaR, ThetaS float64 // residual and saturated water content, m3/m3
	Alpha          float64 // 1/kPa
	N              float64 // > 1
}

// cmPerKPa is the height of a water column that exerts 1 kPa, cm
// (1000 Pa / (1000 kg m-3 x 9.80665 m s-2) = 0.10197 m; standard gravity).
const cmPerKPa = 10.197

// Validate reports the first impossible parameter.
func (r Retention) Validate() error {
	if !(r.ThetaR >= 0 && r.ThetaR < r.ThetaS && r.ThetaS <= MaxFieldCapacity) {
		return fmt.Errorf("retention: need 0 <= theta_r < theta_s <= %g m3/m3, got %v/%v: %w", MaxFieldCapacity, r.ThetaR, r.ThetaS, ErrInput)
	}
	if !(r.Alpha > 0 && r.Alpha <= MaxRetentionAlpha) || !(r.N > 1 && r.N <= MaxRetentionN) {
		return fmt.Errorf("retention: need 0 < alpha <= %g 1/kPa and 1 < n <= %g, got %v/%v: %w", MaxRetentionAlpha, MaxRetentionN, r.Alpha, r.N, ErrInput)
	}
	return nil
}

// Theta returns the water content at a tension of h kPa (van Genuchten 1980
// eq. 21): θ = θr + (θs - θr) / [1 + (α h)^n]^m, m = 1 - 1/n.
func (r Retention) Theta(h float64) float64 {
	if h <= 0 {
		return r.ThetaS
	}
	m := 1 - 1/r.N
	return r.ThetaR + (r.ThetaS-r.ThetaR)/math.Pow(1+math.Pow(r.Alpha*h, r.N), m)
}

// Tension returns the tension, kPa, at water content theta (the inverse of
// Theta): h = [Se^(-1/m) - 1]^(1/n) / α. At or above θs it is 0; at or
// below θr it is +Inf.
func (r Retention) Tension(theta float64) float64 {
	if theta >= r.ThetaS {
		return 0
	}
	if theta <= r.ThetaR {
		return math.Inf(1)
	}
	m := 1 - 1/r.N
	se := (theta - r.ThetaR) / (r.ThetaS - r.ThetaR)
	return math.Pow(math.Pow(se, -1/m)-1, 1/r.N) / r.Alpha
}

// Tensions at field capacity and at the permanent wilting point, kPa: -33
// kPa and -1500 kPa are the conventional points (FAO-56 chapter 8 defines θFC
// and θWP; the two tensions are common practice, from memory).
const (
	FieldCapacityKPa = 33
	WiltingPointKPa  = 1500
)

// carselParrish are the mean van Genuchten parameters of the twelve USDA
// textures in Carsel and Parrish (1988), Water Resources Research 24(5),
// Table 3 (θr, θs, α in 1/cm, n; from memory).
var carselParrish = map[string][4]float64{
	"sand":            {0.045, 0.43, 0.145, 2.68},
	"loamy sand":      {0.057, 0.41, 0.124, 2.28},
	"sandy loam":      {0.065, 0.41, 0.075, 1.89},
	"loam":            {0.078, 0.43, 0.036, 1.56},
	"silt":            {0.034, 0.46, 0.016, 1.37},
	"silt loam":       {0.067, 0.45, 0.020, 1.41},
	"sandy clay loam": {0.100, 0.39, 0.059, 1.48},
	"clay loam":       {0.095, 0.41, 0.019, 1.31},
	"silty clay loam": {0.089, 0.43, 0.010, 1.23},
	"sandy clay":      {0.100, 0.38, 0.027, 1.23},
	"silty clay":      {0.070, 0.36, 0.005, 1.09},
	"clay":            {0.068, 0.38, 0.008, 1.09},
}

// Texture returns the Carsel and Parrish (1988) mean retention curve of a
// USDA texture class ("loam", "sandy loam", ...), α converted from 1/cm to
// 1/kPa, and whether the name is known.
func Texture(name string) (Retention, bool) {
	p, ok := carselParrish[name]
	if !ok {
		return Retention{}, false
	}
	return Retention{ThetaR: p[0], ThetaS: p[1], Alpha: p[2] * cmPerKPa, N: p[3]}, true
}

// Textures lists the texture names Texture knows, sorted.
func Textures() []string {
	out := make([]string, 0, len(carselParrish))
	for k := range carselParrish {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// Probe is one soil-moisture sensor assigned to a zone at a depth.
type Probe struct {
	ID    string  // sensor id
	Depth float64 // m below the surface
}

// ProbeSet is a zone's probes and how their readings are used: converted
// to a depletion over the root zone, fused with the model's, and watched.
type ProbeSet struct {
	Probes []Probe // sorted by depth
	// Retention converts tension to water content; it also gives θFC and
	// θWP (at 33 and 1500 kPa) when the soil states only available water.
	Retention *Retention
	// ProbeSD is the standard deviation of the probe depletion estimate,
	// mm (placement and calibration); ModelRel the model's uncertainty per
	// mm of water it moves (ETc and effective rain), a fraction.
	ProbeSD, ModelRel float64
	// FreshHours: a reading older than this at an hour's end is not used.
	FreshHours int
	// DisagreeMM and DisagreeDays: alert when the probes' corrections of
	// a day add up to more than DisagreeMM (one sign) for DisagreeDays days
	// in a row: the model keeps drifting away from what the field says.
	DisagreeMM   float64
	DisagreeDays int
	// StuckHours: alert when a probe's reading stays within StuckDelta
	// (% by volume, or kPa) while the model's crop ET over the time passes
	// StuckETcMM.
	StuckHours int
	StuckDelta float64
	StuckETcMM float64
	// ResponseHours: after an irrigation of at least ResponseMM, the
	// shallowest probe must get wetter (by StuckDelta) within this time.
	ResponseHours int
	ResponseMM    float64
}

// Validate reports the first impossible setting.
func (ps *ProbeSet) Validate(s Soil) error {
	if len(ps.Probes) == 0 {
		return fmt.Errorf("probes: at least one is required: %w", ErrInput)
	}
	for i, p := range ps.Probes {
		if p.ID == "" || !(p.Depth > 0 && p.Depth <= MaxRootDepth) {
			return fmt.Errorf("probes[%d]: need a sensor id and a depth within (0, %g] m, got %q at %v: %w", i, MaxRootDepth, p.ID, p.Depth, ErrInput)
		}
		if i > 0 && p.Depth <= ps.Probes[i-1].Depth {
			return fmt.Errorf("probes[%d]: depths must increase, got %v after %v m: %w", i, p.Depth, ps.Probes[i-1].Depth, ErrInput)
		}
	}
	if ps.Retention != nil {
		if err := ps.Retention.Validate(); err != nil {
			return fmt.Errorf("probes: %w", err)
		}
	} else if s.AvailableWater > 0 {
		return fmt.Errorf("probes: the soil gives only available water: give field capacity and wilting point, or a retention curve: %w", ErrInput)
	}
	if !(ps.ProbeSD >= MinProbeSD && ps.ProbeSD <= MaxProbeSD) || !(ps.ModelRel > 0 && ps.ModelRel <= MaxModelRel) {
		return fmt.Errorf("probes: need probe sd within %g-%g mm and model uncertainty within (0, %g], got %v/%v: %w", MinProbeSD, MaxProbeSD, MaxModelRel, ps.ProbeSD, ps.ModelRel, ErrInput)
	}
	if ps.FreshHours < 1 || ps.DisagreeDays < 1 || ps.StuckHours < 1 || ps.ResponseHours < 1 ||
		!(ps.DisagreeMM > 0) || !(ps.StuckDelta > 0) || ps.StuckETcMM < 0 || !(ps.ResponseMM > 0) {
		return fmt.Errorf("probes: hours, days and thresholds must be > 0: %w", ErrInput)
	}
	return nil
}

// fcWP returns θFC and θWP, m3/m3: the soil's, or the curve's at 33 and
// 1500 kPa.
func (ps *ProbeSet) fcWP(s Soil) (float64, float64) {
	if s.AvailableWater == 0 && s.FieldCapacity > 0 {
		return s.FieldCapacity, s.WiltingPoint
	}
	return ps.Retention.Theta(FieldCapacityKPa), ps.Retention.Theta(WiltingPointKPa)
}

// ProbeReading is one probe's latest reading: water content in % by
// volume (hourly.SoilWater) or tension in kPa (hourly.SoilTension).
type ProbeReading struct {
	Probe    string          `json:"probe"`
	Quantity hourly.Quantity `json:"quantity"`
	Value    float64         `json:"value"`
	Time     time.Time       `json:"time"`
}

// theta returns the reading as water content, m3/m3.
func (ps *ProbeSet) theta(r ProbeReading) (float64, error) {
	switch r.Quantity {
	case hourly.SoilWater:
		return r.Value / 100, nil
	case hourly.SoilTension:
		if ps.Retention == nil {
			return 0, fmt.Errorf("probe %s: a tension reading needs a retention curve (probes.retention or probes.texture): %w", r.Probe, ErrInput)
		}
		return ps.Retention.Theta(r.Value), nil
	}
	return 0, fmt.Errorf("probe %s: quantity %q is not a soil-moisture quantity: %w", r.Probe, r.Quantity, ErrInput)
}

// ProbeLayer is the part of the root zone one probe stands for.
type ProbeLayer struct {
	Probe       string
	Top, Bottom float64 // m
	Theta       float64 // m3/m3
	DepletionMM float64
}

// ProbeEstimate is the probes' depletion of the root zone at one time.
type ProbeEstimate struct {
	DepletionMM float64
	Layers      []ProbeLayer
}

// ProbeDepletion estimates the root-zone depletion at t from the latest
// readings: each probe stands for the soil from midway to the probe above
// (the surface for the first) to midway to the probe below (the root depth
// for the last; probes below the root depth are left out), and a layer's
// depletion is 1000 (θFC - θ) times its thickness, at least 0 (water above
// field capacity drains, FAO-56 eq. 88) and at most its share of TAW (FAO-56
// eq. 82), times the wetted fraction as TAW is. It reports false when a probe
// inside the root zone has no reading fresher than FreshHours.
func (z *Zone) ProbeDepletion(st *State, latest map[string]ProbeReading, t time.Time) (ProbeEstimate, bool, error) {
	ps := z.Probes
	zr := z.Soil.RootDepth(z.Crop.Season, t.In(z.Loc))
	fc, wp := ps.fcWP(z.Soil)
	var used []Probe
	for i, p := range ps.Probes {
		if p.Depth <= zr || i == 0 {
			used = append(used, p)
		}
	}
	var est ProbeEstimate
	top := 0.0
	for i, p := range used {
		r, ok := latest[p.ID]
		if !ok || t.Sub(r.Time) > time.Duration(ps.FreshHours)*time.Hour {
			return ProbeEstimate{}, false, nil
		}
		th, err := ps.theta(r)
		if err != nil {
			return ProbeEstimate{}, false, fmt.Errorf("probe depletion zone %s: %w", z.ID, err)
		}
		bottom := zr
		if i+1 < len(used) {
			bottom = (p.Depth + used[i+1].Depth) / 2
		}
		d := clamp(1000*(fc-th)*(bottom-top), 0, 1000*(fc-wp)*(bottom-top)) * z.Soil.Wetted()
		est.Layers = append(est.Layers, ProbeLayer{Probe: p.ID, Top: top, Bottom: bottom, Theta: th, DepletionMM: d})
		est.DepletionMM += d
		top = bottom
	}
	return est, true, nil
}

// ProbeState is what a zone remembers of its probes between steps.
type ProbeState struct {
	// VarMM2 is the variance of the model's depletion, mm2.
	VarMM2 float64 `json:"var_mm2"`
	// Marks per probe: the last reading and when it last moved.
	Marks map[string]ProbeMark `json:"marks,omitempty"`
	// Day is the station-local day being summed; DayInnovMM and DayHours
	// the sum of its probe corrections, mm, and its hours with one.
	Day        time.Time `json:"day,omitzero"`
	DayInnovMM float64   `json:"day_innov_mm"`
	DayHours   int       `json:"day_hours"`
	// DisagreeDays counts the days in a row over DisagreeMM (sign of the
	// last), ProbeDryMM and ModelDryMM the drying seen by each over them
	// (hours without rain or irrigation).
	DisagreeDays int     `json:"disagree_days"`
	DisagreeSign float64 `json:"disagree_sign"`
	ProbeDryMM   float64 `json:"probe_dry_mm"`
	ModelDryMM   float64 `json:"model_dry_mm"`
	// LastProbeMM is the probes' latest depletion estimate, made at LastAt.
	LastProbeMM float64   `json:"last_probe_mm"`
	LastAt      time.Time `json:"last_at,omitzero"`
	// AwaitSince is when an irrigation that the shallowest probe should
	// answer was credited; AwaitBase its water content then, %.
	AwaitSince time.Time `json:"await_since,omitzero"`
	AwaitBase  float64   `json:"await_base"`
	// Active are the probe alert kinds now raised (for change-only alerts).
	Active map[string]bool `json:"active,omitempty"`
}

// ProbeMark is one probe's last reading and when it last changed.
type ProbeMark struct {
	Value     float64         `json:"value"`
	Quantity  hourly.Quantity `json:"quantity"`
	Time      time.Time       `json:"time"`
	ChangedAt time.Time       `json:"changed_at"`
	ETcSince  float64         `json:"etc_since"` // model crop ET since ChangedAt, mm
}

// ProbeFusion is what a step did with the probes.
type ProbeFusion struct {
	ProbeMM      float64 // probe depletion estimate
	ModelMM      float64 // model depletion before the update
	Gain         float64 // Kalman gain K
	CorrectionMM float64 // K (probe - model), added to the depletion
	SDMM         float64 // standard deviation of the fused depletion
}

// Probe alert kinds.
const (
	ProbeDisagree   = "probe-disagree"    // probe and model disagree for days
	ProbeStuck      = "probe-stuck"       // a probe's reading does not move while the crop uses water
	ProbeRange      = "probe-range"       // a reading outside the soil's physical range
	ProbeNoResponse = "probe-no-response" // no wetting seen after an irrigation
)

// ProbeFinding is a probe alert to raise (Active) or clear.
type ProbeFinding struct {
	Kind    string
	Active  bool
	Message string
	Value   float64
	Limit   float64
}

// FuseProbes corrects the zone's depletion after the hour step s with the
// probes' estimate: a scalar Kalman filter. The model's variance grows by
// (ModelRel x water moved)^2 each hour (its error is proportional to the
// ETc and rain it applies: a wrong Kc or ETo, rain partition); the probes'
// variance is ProbeSD^2 (placement, calibration). The update is
// K = P / (P + R), Dr = Dr + K (Dp - Dr), P = (1 - K) P, Dr kept in
// [0, TAW]. A Kalman update is chosen because each side's weight follows
// from its stated uncertainty, so a model long unchecked leans on the probe
// and a just-corrected one does not; it assumes the two errors independent.
// It records the fusion in s (nil when no estimate was available) and
// returns the alert findings that changed.
func (z *Zone) FuseProbes(st *State, s *Step, latest map[string]ProbeReading) ([]ProbeFinding, error) {
	ps := z.Probes
	if st.Probe == nil {
		st.Probe = &ProbeState{VarMM2: ps.ProbeSD * ps.ProbeSD}
	}
	pst := st.Probe
	moved := math.Abs(s.ETc) + math.Abs(s.EffRain)
	pst.VarMM2 += sq(ps.ModelRel * moved)
	var out []ProbeFinding
	out = append(out, z.markProbes(pst, latest, s)...)

	est, ok, err := z.ProbeDepletion(st, latest, s.End)
	if err != nil {
		return out, err
	}
	if !ok {
		return out, nil
	}
	modelMM := st.Depletion
	r := ps.ProbeSD * ps.ProbeSD
	k := pst.VarMM2 / (pst.VarMM2 + r)
	innov := est.DepletionMM - modelMM
	d := clamp(modelMM+k*innov, 0, s.TAW)
	pst.VarMM2 = (1 - k) * pst.VarMM2
	st.Depletion = d
	s.Depletion = d
	s.Probe = &ProbeFusion{ProbeMM: est.DepletionMM, ModelMM: modelMM, Gain: k, CorrectionMM: d - modelMM, SDMM: math.Sqrt(pst.VarMM2)}

	// Drying in an hour without rain: the model's crop ET, and that plus
	// the probes' correction (what the probes say the crop used; the
	// filter's gain averages their noise).
	if s.EffRain == 0 {
		pst.ProbeDryMM += s.ETc + (d - modelMM)
		pst.ModelDryMM += s.ETc
	}
	pst.LastProbeMM, pst.LastAt = est.DepletionMM, s.End
	out = append(out, z.dayDisagreement(pst, d-modelMM, s.End)...)
	return out, nil
}

// NoteIrrigation tells the probes' watch that mm were credited at t: the
// shallowest probe should answer within ResponseHours.
func (z *Zone) NoteIrrigation(st *State, mm float64, t time.Time) {
	if z.Probes == nil || mm < z.Probes.ResponseMM || st.Probe == nil {
		return
	}
	m, ok := st.Probe.Marks[z.Probes.Probes[0].ID]
	if !ok {
		return
	}
	st.Probe.AwaitSince, st.Probe.AwaitBase = t, wetness(m)
}

// wetness is a reading on a scale that grows as the soil wets: % water
// content, or minus the tension in kPa.
func wetness(m ProbeMark) float64 {
	if m.Quantity == hourly.SoilTension {
		return -m.Value
	}
	return m.Value
}

func sq(v float64) float64 { return v * v }

// set records an alert's state and returns a finding when it changed.
func (pst *ProbeState) set(kind string, active bool, msg string, value, limit float64) []ProbeFinding {
	if pst.Active[kind] == active {
		return nil
	}
	if pst.Active == nil {
		pst.Active = map[string]bool{}
	}
	pst.Active[kind] = active
	return []ProbeFinding{{Kind: kind, Active: active, Message: msg, Value: value, Limit: limit}}
}

// markProbes updates each probe's mark from its latest reading and checks
// the physical range, stuck readings and the answer to an irrigation.
func (z *Zone) markProbes(pst *ProbeState, latest map[string]ProbeReading, s *Step) []ProbeFinding {
	ps := z.Probes
	if pst.Marks == nil {
		pst.Marks = map[string]ProbeMark{}
	}
	var out []ProbeFinding
	satPct := 100 * MaxFieldCapacity
	if ps.Retention != nil {
		satPct = 100 * ps.Retention.ThetaS
	}
	var bad, stuck string
	var badV, stuckH float64
	for _, p := range ps.Probes {
		r, ok := latest[p.ID]
		if !ok {
			continue
		}
		m, had := pst.Marks[p.ID]
		if !had || r.Quantity != m.Quantity || math.Abs(r.Value-m.Value) > ps.StuckDelta {
			m = ProbeMark{Value: r.Value, Quantity: r.Quantity, ChangedAt: r.Time}
		} else {
			m.ETcSince += s.ETc
		}
		m.Time = r.Time
		pst.Marks[p.ID] = m
		// Above saturation (the curve's θs, else the largest field
		// capacity accepted) plus 5 % for calibration slack, or no water
		// at all: no soil holds that (common practice, no source).
		if r.Quantity == hourly.SoilWater && (r.Value > satPct+5 || r.Value < 0.5) && bad == "" {
			bad, badV = fmt.Sprintf("probe %s reads %.1f %% water by volume, outside 0.5-%.0f %%: check its installation (air gaps, standing water) and its calibration", p.ID, r.Value, satPct+5), r.Value
		}
		if h := s.End.Sub(m.ChangedAt).Hours(); h >= float64(ps.StuckHours) && m.ETcSince >= ps.StuckETcMM && stuck == "" {
			stuck, stuckH = fmt.Sprintf("probe %s has not moved by more than %g for %.0f h while the crop used %.1f mm: check the sensor and its cable", p.ID, ps.StuckDelta, h, m.ETcSince), h
		}
	}
	out = append(out, pst.set(ProbeRange, bad != "", orClear(bad, "probe readings back within range"), badV, satPct+5)...)
	out = append(out, pst.set(ProbeStuck, stuck != "", orClear(stuck, "probe readings move again"), stuckH, float64(ps.StuckHours))...)
	if !pst.AwaitSince.IsZero() {
		first := ps.Probes[0].ID
		m := pst.Marks[first]
		switch {
		case wetness(m)-pst.AwaitBase >= ps.StuckDelta:
			pst.AwaitSince = time.Time{}
			out = append(out, pst.set(ProbeNoResponse, false, "the shallowest probe answered an irrigation", 0, 0)...)
		case s.End.Sub(pst.AwaitSince) >= time.Duration(ps.ResponseHours)*time.Hour:
			msg := fmt.Sprintf("probe %s did not get wetter within %d h of the irrigation credited at %s: the water may not reach it (emitter off the probe, blocked lateral, valve not opening) or the probe has failed",
				first, ps.ResponseHours, pst.AwaitSince.In(z.Loc).Format("2006-01-02 15:04"))
			pst.AwaitSince = time.Time{}
			out = append(out, pst.set(ProbeNoResponse, true, msg, float64(ps.ResponseHours), float64(ps.ResponseHours))...)
		}
	}
	return out
}

func orClear(msg, clear string) string {
	if msg != "" {
		return msg
	}
	return clear
}

// dayDisagreement sums the probes' corrections per station-local day; when
// a day ends, it counts days in a row whose sum exceeds DisagreeMM with one
// sign and, after DisagreeDays, raises the
// disagreement alert with the evidence: a probe that does not move has
// failed; one that dries at another rate than the model's crop ET points to
// a wrong Kc (or ETo); one that dries at the model's rate but sits wetter
// or drier points to a wet or dry spot (or its calibration).
func (z *Zone) dayDisagreement(pst *ProbeState, corr float64, t time.Time) []ProbeFinding {
	ps := z.Probes
	lt := t.Add(-time.Nanosecond).In(z.Loc)
	day := time.Date(lt.Year(), lt.Month(), lt.Day(), 0, 0, 0, 0, z.Loc)
	var out []ProbeFinding
	if !pst.Day.IsZero() && day.After(pst.Day) && pst.DayHours > 0 {
		mean := pst.DayInnovMM
		sign := math.Copysign(1, mean)
		if math.Abs(mean) > ps.DisagreeMM && (pst.DisagreeDays == 0 || sign == pst.DisagreeSign) {
			pst.DisagreeDays++
			pst.DisagreeSign = sign
		} else {
			pst.DisagreeDays, pst.ProbeDryMM, pst.ModelDryMM = 0, 0, 0
		}
		if pst.DisagreeDays >= ps.DisagreeDays {
			out = append(out, pst.set(ProbeDisagree, true, z.disagreeEvidence(pst, mean), math.Abs(mean), ps.DisagreeMM)...)
		} else if pst.DisagreeDays == 0 {
			out = append(out, pst.set(ProbeDisagree, false, "probe and model agree again", math.Abs(mean), ps.DisagreeMM)...)
		}
		pst.DayInnovMM, pst.DayHours = 0, 0
	}
	pst.Day = day
	pst.DayInnovMM += corr
	pst.DayHours++
	return out
}

// DryRatioBand is the band of the probe's drying over the model's within
// which the two are taken to agree on the rate (common practice, no source).
var DryRatioBand = [2]float64{0.8, 1.25}

func (z *Zone) disagreeEvidence(pst *ProbeState, mean float64) string {
	side := "drier"
	if mean < 0 {
		side = "wetter"
	}
	head := fmt.Sprintf("the probes found the root zone %.1f mm %s than the model in a day, %d days in a row", math.Abs(mean), side, pst.DisagreeDays)
	if pst.Active[ProbeStuck] {
		return head + "; a probe does not move: the probe has likely failed"
	}
	if pst.ModelDryMM <= 0 {
		return head + "; no dry hours to compare rates yet"
	}
	ratio := pst.ProbeDryMM / pst.ModelDryMM
	if ratio < DryRatioBand[0] || ratio > DryRatioBand[1] {
		return head + fmt.Sprintf("; the probe dries at %.2f times the model's crop ET: the Kc (or the reference ET) is likely wrong", ratio)
	}
	return head + fmt.Sprintf("; the probe dries at the model's rate (%.2f times): it likely sits in a %s spot or its calibration is off", ratio, map[bool]string{true: "wet", false: "dry"}[mean < 0])
}

// ProbeNote is the text a decision adds when the depletion it used was
// corrected by the zone's probes within the last day ("" otherwise).
func (st *State) ProbeNote(now time.Time, loc *time.Location) string {
	p := st.Probe
	if p == nil || p.LastAt.IsZero() || now.Sub(p.LastAt) > 24*time.Hour {
		return ""
	}
	return fmt.Sprintf("; depletion corrected by the soil-moisture probes (%+.1f mm today; they read %.1f mm at %s)",
		p.DayInnovMM, p.LastProbeMM, p.LastAt.In(loc).Format("15:04"))
}
