package config

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/hourly"
)

func TestZoneProbesKeys(t *testing.T) {
	var z Zone
	assert.Nil(t, z.probeSet(), "no probes key: no probes")

	site := &Site{Stations: []Station{{ID: "east", Sensors: []Sensor{
		{ID: "sm20", Format: FormatNumber, Channel: Channel{Quantity: hourly.SoilWater, Unit: "%"}},
		{ID: "tn40", Format: FormatNumber, Channel: Channel{Quantity: hourly.SoilTension, Unit: "cbar"}},
		{ID: "t", Format: FormatNumber, Channel: Channel{Quantity: hourly.AirTemp, Unit: "degC"}},
	}}}}
	z = Zone{Station: "east", Soil: ZoneSoil{FieldCapacity: 0.25, WiltingPoint: 0.12, RootDepthM: 1, P: 0.5},
		Probes: &ZoneProbes{Sensors: []ZoneProbe{{"sm20", 0.2}, {"tn40", 0.4}}, Texture: "loam"}}
	var p Problems
	z.validateProbes("sites[0].zones[0]", &p, site)
	require.NoError(t, p.Err())
	ps := z.probeSet()
	assert.Equal(t, 5.0, ps.ProbeSD)
	assert.Equal(t, 1.5, ps.DisagreeMM)
	require.NotNil(t, ps.Retention)
	assert.Equal(t, 1.56, ps.Retention.N) // loam, Carsel and Parrish (1988), from memory

	// A tension probe without a curve, a channel that is not a probe, a
	// texture misspelt.
	z.Probes = &ZoneProbes{Sensors: []ZoneProbe{{"tn40", 0.4}, {"t", 0.6}}}
	p = Problems{}
	z.validateProbes("sites[0].zones[0]", &p, site)
	err := p.Err()
	require.Error(t, err)
	assert.ErrorContains(t, err, `sites[0].zones[0].probes.sensors[1].sensor: no channel "t" of quantity soil_water or soil_tension on station "east"`)
	assert.ErrorContains(t, err, "sites[0].zones[0].probes: a soil_tension probe needs texture or retention")
	z.Probes = &ZoneProbes{Sensors: []ZoneProbe{{"sm20", 0.2}}, Texture: "loamy"}
	p = Problems{}
	z.validateProbes("sites[0].zones[0]", &p, site)
	assert.ErrorContains(t, p.Err(), `sites[0].zones[0].probes.texture: must be one of clay, clay loam,`)
}
