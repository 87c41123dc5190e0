package store

import (
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"

	"etpulse/gateway/config"
)

func TestSetupFromConfig(t *testing.T) {
	t.Setenv("ETPULSE_EXAMPLE_TOKEN", "lowfield-token")
	cfg, err := config.Load("../../testdata/store/store.yaml")
	require.NoError(t, err)
	db := openTestDB(t)
	o, w, err := Setup(db, cfg.Store, nil, prometheus.NewRegistry(), nil)
	require.NoError(t, err)
	require.NotNil(t, w)
	assert.Equal(t, 50000, o.Cap())
	assert.True(t, o.opt.RawSummaries)
	assert.False(t, o.opt.LocalOnly)
	assert.Equal(t, 4392*time.Hour, o.History().retention)
	assert.Equal(t, WriterOptions{
		URL: "http://127.0.0.1:8428", Org: "lowfield", Bucket: "weather", Token: "lowfield-token",
		BatchSize: 250, FlushInterval: 2 * time.Second, MinBackoff: DefaultMinBackoff, MaxBackoff: 2 * time.Minute,
		BackfillRate: 400, MaxFuture: DefaultMaxFuture, MaxAge: 8760 * time.Hour, WriteTimeout: DefaultWriteTimeout,
	}, func() WriterOptions { o := w.opt; o.Logger, o.Registerer = nil, nil; return o }())
	w.Close()
}

func TestSetupLocalOnly(t *testing.T) {
	cfg, err := config.Load("../../testdata/store/local.yaml")
	require.NoError(t, err)
	o, w, err := Setup(openTestDB(t), cfg.Store, nil, nil, nil)
	require.NoError(t, err)
	assert.Nil(t, w, "no server, no writer")
	assert.True(t, o.opt.LocalOnly)
	assert.Equal(t, 720*time.Hour, o.History().retention)
}

func TestSetupTokenMissing(t *testing.T) {
	cfg, err := config.Load("../../testdata/store/store.yaml")
	require.NoError(t, err)
	_, _, err = Setup(openTestDB(t), cfg.Store, nil, nil, nil)
	require.ErrorContains(t, err, "environment variable ETPULSE_EXAMPLE_TOKEN is not set")
}
