// Package status is the read model behind the status pages and their JSON
// API (version 1): it gathers, for one moment, what a farm manager looks at
// (stations' last readings and reference ET, zones' depletion against RAW
// and TAW, holds, planned and past runs, alerts) from the configuration, the
// local history, the hour pipeline, the zone service and the alert monitor.
// It reads only; the types here are the API's wire types.
package status

import (
	"errors"
	"time"
)

// APIVersion is the version of the JSON API the types describe; the routes
// are under /api/v1/.
const APIVersion = 1

// ErrNotFound is returned for a station or zone that is not configured.
var ErrNotFound = errors.New("not configured")

// Overview is the farm at a glance (GET /api/v1/overview).
type Overview struct {
	Version      int              `json:"version"`
	Generated    time.Time        `json:"generated"`
	Stations     []StationSummary `json:"stations"`
	Zones        []ZoneSummary    `json:"zones"`
	ActiveAlerts int              `json:"active_alerts"`
}

// StationSummary is one station on the overview.
type StationSummary struct {
	Site      string `json:"site"`
	Station   string `json:"station"`
	Reference string `json:"reference"` // short, tall or fao56
	ETLabel   string `json:"et_label"`  // ETos, ETrs or ETo
	// UTCOffsetHours is the station's standard time; local days and the
	// pages' clock times use it.
	UTCOffsetHours float64 `json:"utc_offset_hours"`
	// LastReading is when the latest reading was accepted (pipeline clock);
	// absent when no sensor has been heard. AgeSeconds is its age at
	// Generated.
	LastReading *time.Time `json:"last_reading,omitempty"`
	AgeSeconds  *float64   `json:"age_seconds,omitempty"`
	// TodayET is the reference ET of the local (standard time) day's closed
	// hours so far, over TodayHours hours with ET; Yesterday likewise for
	// the whole previous day.
	TodayET        float64     `json:"today_et_mm"`
	TodayHours     int         `json:"today_hours"`
	YesterdayET    float64     `json:"yesterday_et_mm"`
	YesterdayHours int         `json:"yesterday_hours"`
	Alerts         []AlertView `json:"alerts"` // active alerts of the station
}

// ZoneSummary is one irrigation zone on the overview.
type ZoneSummary struct {
	Site    string `json:"site"`
	Zone    string `json:"zone"`
	Station string `json:"station"`
	// UTCOffsetHours is the standard time of the zone's station.
	UTCOffsetHours float64 `json:"utc_offset_hours"`
	// Depletion is the root-zone depletion Dr now, mm below field capacity;
	// TAW and RAW (FAO-56 eq. 82, 83), Trigger (the depletion that makes
	// the zone due) and Target (the depletion a run refills to) in mm.
	Depletion float64    `json:"depletion_mm"`
	TAW       float64    `json:"taw_mm"`
	RAW       float64    `json:"raw_mm"`
	Trigger   float64    `json:"trigger_mm"`
	Target    float64    `json:"target_mm"`
	Hold      *HoldView  `json:"hold,omitempty"`     // the hold in force, if any
	NextRun   *PlanView  `json:"next_run,omitempty"` // the next planned run, if any
	Stressed  bool       `json:"stressed"`           // depletion beyond RAW (Ks < 1, FAO-56 eq. 84)
	LastValid *time.Time `json:"last_valid_et,omitempty"`
}

// HoldView is a hold in force on a zone.
type HoldView struct {
	Scope   string     `json:"scope"` // "site" or "zone"
	Forever bool       `json:"forever"`
	Until   *time.Time `json:"until,omitempty"`
	Reason  string     `json:"reason"`
}

// PlanView is a planned run: its first cycle's start, minutes per cycle and
// the number of cycles.
type PlanView struct {
	Start   time.Time `json:"start"`
	Minutes int       `json:"minutes"`
	Cycles  int       `json:"cycles"`
}

// StationPage is one station's recent hours (GET /api/v1/stations/{site}/{station}).
type StationPage struct {
	Version int            `json:"version"`
	Summary StationSummary `json:"summary"`
	// From and To bound the hours shown (To is the generation time).
	From            time.Time   `json:"from"`
	To              time.Time   `json:"to"`
	UTCOffsetHours  float64     `json:"utc_offset_hours"`
	Hours           []HourView  `json:"hours"`
	RevisedHours    int         `json:"revised_hours"`
	FilledHours     int         `json:"filled_hours"`
	FlaggedHours    int         `json:"flagged_hours"`
	IncompleteHours int         `json:"incomplete_hours"`
	ClearedAlerts   []AlertView `json:"cleared_alerts"`
}

// HourView is one closed station hour. Absent values were not measured or
// not computed for the hour.
type HourView struct {
	Start    time.Time `json:"start"`
	Local    string    `json:"local_start"` // station standard time
	ET       *float64  `json:"et_mm,omitempty"`
	Rs       *float64  `json:"solar_mj_m2,omitempty"` // measured (or estimated) solar radiation
	Rso      *float64  `json:"rso_mj_m2,omitempty"`
	AirTemp  *float64  `json:"air_temp_c,omitempty"`
	RH       *float64  `json:"rh_pct,omitempty"` // 100 ea/es of the hour
	Rain     float64   `json:"rain_mm"`
	Day      bool      `json:"day"` // the sun was up (ASCE-EWRI 2005 day/night G)
	Revision int       `json:"revision"`
	Complete bool      `json:"complete"`
	Fill     string    `json:"fill,omitempty"` // gap-filling method used
	Flags    []string  `json:"flags,omitempty"`
}

// ZonePage is one zone's recent balance (GET /api/v1/zones/{site}/{zone}).
type ZonePage struct {
	Version     int         `json:"version"`
	Summary     ZoneSummary `json:"summary"`
	From        time.Time   `json:"from"`
	To          time.Time   `json:"to"`
	Steps       []StepView  `json:"steps"` // balance steps, oldest first
	Days        []DayView   `json:"days"`  // one per local day of the window, oldest first
	Runs        []RunView   `json:"runs"`  // latest runs first
	StressHours int         `json:"stress_hours"`
}

// StepView is one balance step: an hour (ETc, rain) or a credit (irrigation).
type StepView struct {
	Time       time.Time `json:"time"`
	Kind       string    `json:"kind"` // hour or credit
	Depletion  float64   `json:"depletion_mm"`
	RAW        float64   `json:"raw_mm"`
	TAW        float64   `json:"taw_mm"`
	ETc        float64   `json:"etc_mm"`
	EffRain    float64   `json:"eff_rain_mm"`
	Irrigation float64   `json:"irrigation_mm"`
	Ks         float64   `json:"ks"`
	Estimated  bool      `json:"estimated,omitempty"` // driven by gap-filled ET
	Missing    bool      `json:"missing,omitempty"`   // no ET for the hour
}

// DayView totals one local day of a zone.
type DayView struct {
	Date        string  `json:"date"`
	ETc         float64 `json:"etc_mm"`
	EffRain     float64 `json:"eff_rain_mm"`
	Irrigation  float64 `json:"irrigation_mm"`
	StressHours int     `json:"stress_hours"`
}

// RunView is one valve command cycle and what its controller reported.
type RunView struct {
	ID         string     `json:"id"`
	Start      time.Time  `json:"start"`
	Cycle      int        `json:"cycle"`
	Cycles     int        `json:"cycles"`
	Minutes    int        `json:"minutes"` // commanded
	State      string     `json:"state"`
	MinutesRun *float64   `json:"minutes_run,omitempty"` // reported
	VolumeL    *float64   `json:"volume_l,omitempty"`    // reported by a flow meter
	Credit     float64    `json:"credit_mm"`
	Credited   bool       `json:"credited"`
	Ended      *time.Time `json:"ended,omitempty"`
	Note       string     `json:"note,omitempty"`
}

// AlertsPage lists active and recently cleared alerts (GET /api/v1/alerts).
type AlertsPage struct {
	Version   int         `json:"version"`
	Generated time.Time   `json:"generated"`
	Active    []AlertView `json:"active"`
	Cleared   []AlertView `json:"cleared"` // cleared within ClearedWindow
}

// ClearedWindow is how far back cleared alerts are listed.
const ClearedWindow = 7 * 24 * time.Hour

// AlertView is one alert with its evidence.
type AlertView struct {
	Site     string     `json:"site"`
	Station  string     `json:"station"`
	Sensor   string     `json:"sensor"`
	Quantity string     `json:"quantity"`
	Kind     string     `json:"kind"`
	Severity string     `json:"severity"`
	Message  string     `json:"message"` // the evidence
	Value    *float64   `json:"value,omitempty"`
	Limit    *float64   `json:"limit,omitempty"`
	Since    *time.Time `json:"since,omitempty"`
	Updated  time.Time  `json:"updated"`
	Cleared  *time.Time `json:"cleared,omitempty"`
}
