package controllers

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

// defaultProbes is a probe pair at 0.2 and 0.6 m with the settings the
// configuration defaults to.
func defaultProbes() *ProbeSet {
	return &ProbeSet{Probes: []Probe{{"sm20", 0.2}, {"sm60", 0.6}},
		ProbeSD: 5, ModelRel: 0.5, FreshHours: 3, DisagreeMM: 1.5, DisagreeDays: 3,
		StuckHours: 48, StuckDelta: 0.2, StuckETcMM: 5, ResponseHours: 12, ResponseMM: 5}
}

func TestTextureCarselParrish(t *testing.T) {
	// Carsel and Parrish (1988) Table 3, loam: θr 0.078, θs 0.43, α 0.036
	// 1/cm, n 1.56 (from memory); α in 1/kPa is 0.036 x 10.197.
	r, ok := Texture("loam")
	require.True(t, ok)
	assert.Equal(t, 0.078, r.ThetaR)
	assert.Equal(t, 0.43, r.ThetaS)
	assert.InDelta(t, 0.3671, r.Alpha, 1e-4)
	assert.Equal(t, 1.56, r.N)
	require.NoError(t, r.Validate())
	// Sand: θr 0.045, θs 0.43, α 0.145 1/cm, n 2.68 (same table, from memory).
	r, _ = Texture("sand")
	assert.Equal(t, [3]float64{0.045, 0.43, 2.68}, [3]float64{r.ThetaR, r.ThetaS, r.N})
	assert.InDelta(t, 0.145*cmPerKPa, r.Alpha, 1e-12)
	assert.Len(t, Textures(), 12) // the twelve USDA texture classes
	_, ok = Texture("loamy")
	assert.False(t, ok)
}

func TestRetentionVanGenuchten(t *testing.T) {
	r, _ := Texture("silt loam")
	// van Genuchten (1980) eq. 21: saturated at zero tension.
	assert.Equal(t, r.ThetaS, r.Theta(0))
	// At α h = 1 the effective saturation is 2^-m, m = 1 - 1/n (eq. 21
	// with (αh)^n = 1).
	m := 1 - 1/r.N
	se := (r.Theta(1/r.Alpha) - r.ThetaR) / (r.ThetaS - r.ThetaR)
	assert.InDelta(t, math.Pow(2, -m), se, 1e-12)
	// For large tension Se tends to (α h)^-(n-1) (van Genuchten 1980: Se ~
	// (αh)^(-mn) with mn = n - 1).
	h := 1e6
	se = (r.Theta(h) - r.ThetaR) / (r.ThetaS - r.ThetaR)
	assert.InDelta(t, 1, se*math.Pow(r.Alpha*h, r.N-1), 1e-3)
	// Tension is the inverse of Theta, and the curve falls with tension.
	prev := r.ThetaS
	for _, h := range []float64{1, 10, 33, 100, 500, 1500} {
		th := r.Theta(h)
		assert.Less(t, th, prev, "h %v", h)
		prev = th
		assert.InDelta(t, h, r.Tension(th), 1e-6*h, "h %v", h)
	}
	assert.True(t, math.IsInf(r.Tension(r.ThetaR), 1))
	assert.Zero(t, r.Tension(r.ThetaS))
}

func TestProbeDepletionLayers(t *testing.T) {
	z := maizeZone() // loam θFC 0.25, θWP 0.12, Zr 1.0 m
	z.Probes = defaultProbes()
	require.NoError(t, z.Validate())
	_, end := hourAt(10)
	latest := map[string]ProbeReading{
		"sm20": {Probe: "sm20", Quantity: hourly.SoilWater, Value: 20, Time: end},
		"sm60": {Probe: "sm60", Quantity: hourly.SoilWater, Value: 23, Time: end.Add(-time.Hour)},
	}
	est, ok, err := z.ProbeDepletion(&State{}, latest, end)
	require.NoError(t, err)
	require.True(t, ok)
	// Layers 0-0.4 m and 0.4-1.0 m (midway between the probes, then the
	// root depth); 1000 (θFC - θ) x thickness (FAO-56 eq. 82 form):
	// 1000 x 0.05 x 0.4 = 20 mm and 1000 x 0.02 x 0.6 = 12 mm.
	require.Len(t, est.Layers, 2)
	assert.InDelta(t, 0.4, est.Layers[0].Bottom, 1e-12)
	assert.InDelta(t, 20, est.Layers[0].DepletionMM, 1e-9)
	assert.InDelta(t, 12, est.Layers[1].DepletionMM, 1e-9)
	assert.InDelta(t, 32, est.DepletionMM, 1e-9)

	// Wetter than field capacity counts as no depletion; a stale reading
	// gives no estimate.
	latest["sm20"] = ProbeReading{Probe: "sm20", Quantity: hourly.SoilWater, Value: 31, Time: end}
	est, _, _ = z.ProbeDepletion(&State{}, latest, end)
	assert.InDelta(t, 12, est.DepletionMM, 1e-9)
	_, ok, _ = z.ProbeDepletion(&State{}, latest, end.Add(4*time.Hour))
	assert.False(t, ok)

	// A tension reading needs a retention curve.
	latest["sm20"] = ProbeReading{Probe: "sm20", Quantity: hourly.SoilTension, Value: 33, Time: end}
	_, _, err = z.ProbeDepletion(&State{}, latest, end)
	require.ErrorIs(t, err, ErrInput)
	assert.Contains(t, err.Error(), "retention curve")
	r, _ := Texture("loam")
	z.Probes.Retention = &r
	est, ok, err = z.ProbeDepletion(&State{}, latest, end)
	require.NoError(t, err)
	require.True(t, ok)
	assert.InDelta(t, 1000*(0.25-r.Theta(33))*0.4+12, est.DepletionMM, 1e-9)
}

func TestProbeSetValidate(t *testing.T) {
	z := maizeZone()
	z.Probes = defaultProbes()
	z.Probes.Probes = []Probe{{"a", 0.6}, {"b", 0.2}}
	assert.ErrorContains(t, z.Validate(), "depths must increase")
	z.Probes = defaultProbes()
	z.Soil = Soil{AvailableWater: 140, RootMax: 1, P: 0.5}
	assert.ErrorContains(t, z.Validate(), "give field capacity and wilting point, or a retention curve")
	z.Probes.ProbeSD = 0
	r, _ := Texture("loam")
	z.Probes.Retention = &r
	assert.ErrorContains(t, z.Validate(), "probe sd")
}

// probeSeason runs a synthetic 90-day season hour by hour. The truth is a
// zone with Kc 1.2; the model believes Kc 0.8 (deliberately wrong). Both get
// the same weather (a sine-shaped daytime ETo of 6 mm/day, a 20 mm rain on
// day 30) and the same irrigation (25 mm every 4 days at 22:00). The probes
// read the true water content with independent noise of 0.01 m3/m3 (1 %
// by volume) per reading. It returns the root-mean-square errors of the
// model alone, the probes alone and the fused depletion against the truth.
func probeSeason(t *testing.T, seed uint64) (model, probe, fused float64, alerts []ProbeFinding) {
	t.Helper()
	truth := maizeZone()
	open := maizeZone()
	open.Crop.Kc = 0.8
	fz := maizeZone()
	fz.Crop.Kc = 0.8
	fz.Probes = defaultProbes()
	require.NoError(t, fz.Validate())
	rng := rand.New(rand.NewPCG(seed, 1))
	var ts, os, fs State
	var n int
	var se [3]float64
	for h := 0; h < 90*24; h++ {
		lh := h % 24
		et := 0.0
		if lh >= 6 && lh < 18 {
			et = 6 * math.Pi / 24 * math.Sin(math.Pi*float64(lh-6)/12) // integrates to 6 mm/day
		}
		rain := 0.0
		if h == 30*24+14 {
			rain = 20
		}
		in := validHour(h, et, rain)
		_, err := stepOK(truth, &ts, in)
		require.NoError(t, err)
		_, err = stepOK(open, &os, in)
		require.NoError(t, err)
		s, err := stepOK(fz, &fs, in)
		require.NoError(t, err)
		// The probes read the truth: a uniform profile θ = θFC - Dr / (1000 Zr).
		theta := 0.25 - ts.Depletion/1000
		latest := map[string]ProbeReading{}
		for _, p := range fz.Probes.Probes {
			latest[p.ID] = ProbeReading{Probe: p.ID, Quantity: hourly.SoilWater, Value: 100 * (theta + 0.01*rng.NormFloat64()), Time: in.End}
		}
		f, err := fz.FuseProbes(&fs, &s, latest)
		require.NoError(t, err)
		alerts = append(alerts, f...)
		est, ok, err := fz.ProbeDepletion(&fs, latest, in.End)
		require.NoError(t, err)
		require.True(t, ok)
		if lh == 21 && h/24%4 == 3 {
			_, end := hourAt(h)
			for _, zs := range []struct {
				z  *Zone
				st *State
			}{{truth, &ts}, {open, &os}, {fz, &fs}} {
				_, err := zs.z.Credit(zs.st, "run", 25, end)
				require.NoError(t, err)
			}
			fz.NoteIrrigation(&fs, 25, end)
		}
		if h >= 7*24 { // after a week of spin-up
			n++
			se[0] += sq(os.Depletion - ts.Depletion)
			se[1] += sq(est.DepletionMM - ts.Depletion)
			se[2] += sq(fs.Depletion - ts.Depletion)
		}
	}
	return math.Sqrt(se[0] / float64(n)), math.Sqrt(se[1] / float64(n)), math.Sqrt(se[2] / float64(n)), alerts
}

func stepOK(z *Zone, st *State, in HourInput) (Step, error) {
	s, _, err := z.StepHour(st, in)
	return s, err
}

func TestFusionSyntheticSeason(t *testing.T) {
	for _, seed := range []uint64{1, 2, 3} {
		model, probe, fused, alerts := probeSeason(t, seed)
		t.Logf("seed %d: depletion RMSE model alone %.1f mm, probes alone %.1f mm, fused %.1f mm", seed, model, probe, fused)
		assert.Less(t, fused, probe, "seed %d", seed)
		assert.Less(t, fused, model, "seed %d", seed)
		var kinds []string
		for _, a := range alerts {
			if a.Active {
				kinds = append(kinds, a.Kind+": "+a.Message)
			}
		}
		t.Logf("seed %d: alerts %q", seed, kinds)
		// The probes keep finding the soil drier than the model: the
		// evidence points at the Kc (the probe dries faster).
		require.NotEmpty(t, kinds, "seed %d", seed)
		assert.Contains(t, kinds[0], ProbeDisagree)
		assert.Contains(t, kinds[0], "Kc")
	}
}

func TestPlanSaysProbesCorrected(t *testing.T) {
	z := maizeZone()
	z.Probes = defaultProbes()
	now := at(1, 21, 0)
	st := withWeather(&State{Depletion: 75}, now)
	p := PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Why, 1)
	assert.NotContains(t, p.Why[0].Reason, "probes", "no fusion yet: the reason does not name the probes")

	st.Probe = &ProbeState{LastAt: now.Add(-time.Hour), LastProbeMM: 80, DayInnovMM: 12.5}
	p = PlanRuns(now, []ZoneInput{{z, st}}, nil, nil, Holds{})
	require.Len(t, p.Why, 1)
	assert.Contains(t, p.Why[0].Reason, "depletion corrected by the soil-moisture probes (+12.5 mm today; they read 80.0 mm at 20:00)")
}
