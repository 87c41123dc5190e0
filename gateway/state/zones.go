package state

import (
	"encoding/json"
	"fmt"
	"maps"
	"time"

	"etpulse/controllers"
	"etpulse/hourly"
)

// LedgerEntry is how the state file keeps one valve command (bucket
// zones/ledger, key site/command id), schema version 2. It is the
// persistence form of controllers.Command: renaming a field of the domain
// type changes nothing on disk; changing this struct bumps Version.
type LedgerEntry struct {
	ID     string      `json:"id"`
	Zone   string      `json:"zone"`
	Valve  string      `json:"valve"`
	Source string      `json:"source,omitempty"`
	Plan   LedgerPlan  `json:"plan"`
	State  string      `json:"state"`
	Sends  LedgerSends `json:"sends"`
	Run    LedgerRun   `json:"run"`
	Stop   *LedgerStop `json:"stop,omitempty"`
}

// LedgerPlan is what was planned, with the zone figures copied at planning.
type LedgerPlan struct {
	Start          time.Time `json:"start"`
	Expiry         time.Time `json:"expiry"`
	Minutes        int       `json:"minutes"`
	Cycle          int       `json:"cycle"`
	Cycles         int       `json:"cycles"`
	Basis          string    `json:"basis,omitempty"`
	DepletionMM    float64   `json:"depletion_mm"`
	TriggerMM      float64   `json:"trigger_mm"`
	EtcSinceLastMM float64   `json:"etc_since_last_mm"`
	ProjectedMM    float64   `json:"projected_mm,omitempty"`
	ShortMM        float64   `json:"short_mm,omitempty"`
	RateMMH        float64   `json:"rate_mm_h"`
	Efficiency     float64   `json:"efficiency"`
	AreaM2         float64   `json:"area_m2"`
	FlowLMin       float64   `json:"flow_l_min"`
}

// LedgerSends counts the publishes of the command.
type LedgerSends struct {
	Count  int       `json:"count"`
	LastAt time.Time `json:"last_at,omitzero"`
}

// LedgerRun is what the controller reported and what was credited.
type LedgerRun struct {
	StartedAt    time.Time `json:"started_at,omitzero"`
	EndedAt      time.Time `json:"ended_at,omitzero"`
	Minutes      float64   `json:"minutes"`
	MinutesKnown bool      `json:"minutes_known"`
	VolumeL      float64   `json:"volume_l"`
	CreditMM     float64   `json:"credit_mm"`
	Credited     bool      `json:"credited"`
	Note         string    `json:"note,omitempty"`
}

// LedgerStop is a stop asked for and its publishes.
type LedgerStop struct {
	At     time.Time `json:"at"`
	Reason string    `json:"reason,omitempty"`
	Count  int       `json:"count"`
	LastAt time.Time `json:"last_at,omitzero"`
}

// LedgerEntryOf converts a command to its persistence form.
func LedgerEntryOf(c controllers.Command) LedgerEntry {
	e := LedgerEntry{ID: c.ID, Zone: c.Zone, Valve: c.Valve, Source: c.Source, State: string(c.State),
		Plan: LedgerPlan{Start: c.Start, Expiry: c.Expiry, Minutes: c.Minutes, Cycle: c.Cycle, Cycles: c.Cycles,
			Basis: string(c.Reason.Basis), DepletionMM: c.Reason.DepletionMM, TriggerMM: c.Reason.TriggerMM,
			EtcSinceLastMM: c.Reason.EtcSinceLastMM, ProjectedMM: c.Reason.ProjectedMM, ShortMM: c.Reason.ShortMM,
			RateMMH: c.Rate, Efficiency: c.Efficiency, AreaM2: c.Area, FlowLMin: c.Flow},
		Sends: LedgerSends{Count: c.Attempts, LastAt: c.SentAt},
		Run: LedgerRun{StartedAt: c.StartedAt, EndedAt: c.EndedAt, Minutes: c.MinutesRun, MinutesKnown: c.RunKnown,
			VolumeL: c.VolumeL, CreditMM: c.CreditMM, Credited: c.Credited, Note: c.Note},
	}
	if !c.StopAt.IsZero() {
		e.Stop = &LedgerStop{At: c.StopAt, Reason: c.StopReason, Count: c.StopAttempts, LastAt: c.StopSentAt}
	}
	return e
}

// Command converts the entry back to the domain type.
func (e LedgerEntry) Command() controllers.Command {
	p := e.Plan
	c := controllers.Command{ID: e.ID, Zone: e.Zone, Valve: e.Valve, Source: e.Source,
		Minutes: p.Minutes, Start: p.Start, Expiry: p.Expiry, Cycle: p.Cycle, Cycles: p.Cycles,
		Reason: controllers.Reason{DepletionMM: p.DepletionMM, TriggerMM: p.TriggerMM, EtcSinceLastMM: p.EtcSinceLastMM,
			Basis: controllers.Basis(p.Basis), ProjectedMM: p.ProjectedMM, ShortMM: p.ShortMM},
		Rate: p.RateMMH, Efficiency: p.Efficiency, Area: p.AreaM2, Flow: p.FlowLMin,
		State: controllers.CommandState(e.State), Attempts: e.Sends.Count, SentAt: e.Sends.LastAt,
		StartedAt: e.Run.StartedAt, EndedAt: e.Run.EndedAt, MinutesRun: e.Run.Minutes, RunKnown: e.Run.MinutesKnown,
		VolumeL: e.Run.VolumeL, CreditMM: e.Run.CreditMM, Credited: e.Run.Credited, Note: e.Run.Note,
	}
	if s := e.Stop; s != nil {
		c.StopAt, c.StopReason, c.StopAttempts, c.StopSentAt = s.At, s.Reason, s.Count, s.LastAt
	}
	return c
}

// EncodeCommand is the stored bytes of a command.
func EncodeCommand(c controllers.Command) ([]byte, error) { return json.Marshal(LedgerEntryOf(c)) }

// DecodeCommand reads a command stored by EncodeCommand.
func DecodeCommand(raw []byte) (controllers.Command, error) {
	var e LedgerEntry
	if err := json.Unmarshal(raw, &e); err != nil {
		return controllers.Command{}, fmt.Errorf("decode ledger entry: %w", err)
	}
	return e.Command(), nil
}

// ZoneBalance is how the state file keeps a zone's water balance (bucket
// zones/state, key site/zone), schema version 2: the persistence form of
// controllers.State plus what the scheduler remembers of the zone.
type ZoneBalance struct {
	DepletionMM   float64       `json:"depletion_mm"`
	LastValidET   time.Time     `json:"last_valid_et,omitzero"`
	ETcSinceRunMM float64       `json:"etc_since_run_mm"`
	Hours         []BalanceHour `json:"hours"`
	// StaleAlert is true while the zone's "no valid ET" alert is raised.
	StaleAlert bool `json:"stale_alert,omitempty"`
	// LastSkip is the last reason the zone got no command (change-only logs).
	LastSkip string `json:"last_skip,omitempty"`
	// Probe is the zone's soil-moisture probe fusion and watch state
	// (variance of the model's depletion, last readings, alert marks);
	// absent for a zone without probes.
	Probe *ZoneProbe `json:"probe,omitempty"`
}

// ZoneProbe is how the state file keeps controllers.ProbeState (schema
// version 3): the persistence form, so the domain type may change.
type ZoneProbe struct {
	VarMM2       float64              `json:"var_mm2"`
	Marks        map[string]ProbeMark `json:"marks,omitempty"`
	Day          time.Time            `json:"day,omitzero"`
	DayInnovMM   float64              `json:"day_innov_mm"`
	DayHours     int                  `json:"day_hours"`
	DisagreeDays int                  `json:"disagree_days"`
	DisagreeSign float64              `json:"disagree_sign"`
	ProbeDryMM   float64              `json:"probe_dry_mm"`
	ModelDryMM   float64              `json:"model_dry_mm"`
	LastProbeMM  float64              `json:"last_probe_mm"`
	LastAt       time.Time            `json:"last_at,omitzero"`
	AwaitSince   time.Time            `json:"await_since,omitzero"`
	AwaitBase    float64              `json:"await_base"`
	Active       map[string]bool      `json:"active,omitempty"`
}

// ProbeMark is one probe's last reading and when it last changed
// (controllers.ProbeMark).
type ProbeMark struct {
	Value     float64   `json:"value"`
	Quantity  string    `json:"quantity"`
	Time      time.Time `json:"time"`
	ChangedAt time.Time `json:"changed_at"`
	ETcSinceM float64   `json:"etc_since"` // model crop ET since ChangedAt, mm
}

func zoneProbeOf(p *controllers.ProbeState) *ZoneProbe {
	if p == nil {
		return nil
	}
	z := &ZoneProbe{VarMM2: p.VarMM2, Day: p.Day, DayInnovMM: p.DayInnovMM, DayHours: p.DayHours,
		DisagreeDays: p.DisagreeDays, DisagreeSign: p.DisagreeSign, ProbeDryMM: p.ProbeDryMM, ModelDryMM: p.ModelDryMM,
		LastProbeMM: p.LastProbeMM, LastAt: p.LastAt, AwaitSince: p.AwaitSince, AwaitBase: p.AwaitBase, Active: maps.Clone(p.Active)}
	if p.Marks != nil {
		z.Marks = make(map[string]ProbeMark, len(p.Marks))
		for k, m := range p.Marks {
			z.Marks[k] = ProbeMark{Value: m.Value, Quantity: string(m.Quantity), Time: m.Time, ChangedAt: m.ChangedAt, ETcSinceM: m.ETcSince}
		}
	}
	return z
}

func (z *ZoneProbe) domain() *controllers.ProbeState {
	if z == nil {
		return nil
	}
	p := &controllers.ProbeState{VarMM2: z.VarMM2, Day: z.Day, DayInnovMM: z.DayInnovMM, DayHours: z.DayHours,
		DisagreeDays: z.DisagreeDays, DisagreeSign: z.DisagreeSign, ProbeDryMM: z.ProbeDryMM, ModelDryMM: z.ModelDryMM,
		LastProbeMM: z.LastProbeMM, LastAt: z.LastAt, AwaitSince: z.AwaitSince, AwaitBase: z.AwaitBase, Active: maps.Clone(z.Active)}
	if z.Marks != nil {
		p.Marks = make(map[string]controllers.ProbeMark, len(z.Marks))
		for k, m := range z.Marks {
			p.Marks[k] = controllers.ProbeMark{Value: m.Value, Quantity: hourly.Quantity(m.Quantity), Time: m.Time, ChangedAt: m.ChangedAt, ETcSince: m.ETcSinceM}
		}
	}
	return p
}

// BalanceHour is one applied station hour of a zone (controllers.HourEntry).
type BalanceHour struct {
	Start      time.Time `json:"start"`
	Revision   int       `json:"revision"`
	Valid      bool      `json:"valid"`
	Fallback   bool      `json:"fallback"`
	ETMM       float64   `json:"et_mm"`
	Kc         float64   `json:"kc"`
	Ks         float64   `json:"ks"`
	ETcMM      float64   `json:"etc_mm"`
	ETcPotMM   float64   `json:"etc_pot_mm"`
	RainMM     float64   `json:"rain_mm"`
	EffRainMM  float64   `json:"eff_rain_mm"`
	DrainageMM float64   `json:"drainage_mm"`
	Wind2MS    *float64  `json:"wind2_m_s,omitempty"`
	AirTempC   *float64  `json:"air_temp_c,omitempty"`
}

// ZoneBalanceOf converts a zone's balance and scheduler marks.
func ZoneBalanceOf(st controllers.State, staleAlert bool, lastSkip string) ZoneBalance {
	b := ZoneBalance{DepletionMM: st.Depletion, LastValidET: st.LastValid, ETcSinceRunMM: st.EtcSinceRun,
		Hours: make([]BalanceHour, 0, len(st.Hours)), StaleAlert: staleAlert, LastSkip: lastSkip, Probe: zoneProbeOf(st.Probe)}
	for _, h := range st.Hours {
		bh := BalanceHour{Start: h.Start, Revision: h.Revision, Valid: h.Valid, Fallback: h.Fallback,
			ETMM: h.ET, Kc: h.Kc, Ks: h.Ks, ETcMM: h.ETc, ETcPotMM: h.ETcPot, RainMM: h.Rain,
			EffRainMM: h.EffRain, DrainageMM: h.Drainage}
		if h.HasWind {
			bh.Wind2MS = &h.Wind2
		}
		if h.HasTemp {
			bh.AirTempC = &h.AirTemp
		}
		b.Hours = append(b.Hours, bh)
	}
	return b
}

// State converts the balance back to the domain type.
func (b ZoneBalance) State() controllers.State {
	st := controllers.State{Depletion: b.DepletionMM, LastValid: b.LastValidET, EtcSinceRun: b.ETcSinceRunMM, Probe: b.Probe.domain()}
	for _, h := range b.Hours {
		e := controllers.HourEntry{Start: h.Start, Revision: h.Revision, Valid: h.Valid, Fallback: h.Fallback,
			ET: h.ETMM, Kc: h.Kc, Ks: h.Ks, ETc: h.ETcMM, ETcPot: h.ETcPotMM, Rain: h.RainMM,
			EffRain: h.EffRainMM, Drainage: h.DrainageMM}
		if h.Wind2MS != nil {
			e.Wind2, e.HasWind = *h.Wind2MS, true
		}
		if h.AirTempC != nil {
			e.AirTemp, e.HasTemp = *h.AirTempC, true
		}
		st.Hours = append(st.Hours, e)
	}
	return st
}

// HoldEntry is a manual hold or rain delay (bucket zones/holds, key site/
// for the whole site or site/zone); unchanged since version 1.
type HoldEntry struct {
	Until   time.Time `json:"until"`
	Forever bool      `json:"forever"`
	Reason  string    `json:"reason"`
}
