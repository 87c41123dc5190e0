package config

import (
	"path/filepath"
	"testing"
	"time"

	"github.com/stretchr/testify/require"
)

// The young-orchard example: canopy, wetted fraction, deficit stage and
// salinity reach the controllers' zone, and the greenhouse zone without a
// station takes the site's inside station.
func TestYoungOrchardExample(t *testing.T) {
	cfg, err := Load(filepath.Join("..", "..", "testdata", "zones", "young-orchard.yaml"))
	require.NoError(t, err)
	site := &cfg.Sites[0]
	pears := &site.Zones[0]
	cz, err := pears.Controller(site.StationByID(pears.Station))
	require.NoError(t, err)
	require.NotNil(t, cz.Crop.Canopy)
	require.Len(t, cz.Crop.Canopy.Cover, 3)
	require.InDelta(t, 0.35, cz.Soil.WettedFraction, 1e-12) // FAO-56 Table 20 drip (from memory)
	require.InDelta(t, 42, cz.Soil.TAW(1), 1e-9)            // 120 mm/m x 1 m x 0.35
	require.Len(t, cz.Stages, 1)
	require.Equal(t, "post-harvest", cz.Stages[0].Name)
	require.InDelta(t, 1.2/(5*1.7-1.2), cz.Salinity.LeachingRequirement(), 1e-12) // FAO-29 LR (from memory)
	mid := time.Date(2026, 7, 15, 12, 0, 0, 0, cz.Loc)
	require.Less(t, cz.Crop.KcOn(mid), cz.Crop.FullKcOn(mid), "partial cover lowers Kc")

	bay := &site.Zones[1]
	require.Equal(t, "glasshouse", bay.Station)
	_, err = bay.Controller(site.StationByID(bay.Station))
	require.NoError(t, err)
}

// Without the new keys a zone builds exactly as before: no canopy, whole
// soil wetted, no stages, no leaching.
func TestOrchardKeysOptional(t *testing.T) {
	cfg, err := Load(filepath.Join("..", "..", "testdata", "zones", "brackenby.yaml"))
	require.NoError(t, err)
	for i := range cfg.Sites[0].Zones {
		z := &cfg.Sites[0].Zones[i]
		cz, err := z.Controller(cfg.Sites[0].StationByID(z.Station))
		require.NoError(t, err)
		require.Nil(t, cz.Crop.Canopy)
		require.Zero(t, cz.Soil.WettedFraction)
		require.Empty(t, cz.Stages)
		require.Zero(t, cz.Salinity.LeachingRequirement())
	}
}
