package promreg

import (
	"testing"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func counter(name string) prometheus.Counter {
	return prometheus.NewCounter(prometheus.CounterOpts{Name: name, Help: "test counter"})
}

func TestRegisterNilRegistererIsNoOp(t *testing.T) {
	assert.NoError(t, Register(nil, "zone", counter("a_total")))
}

func TestRegisterAll(t *testing.T) {
	reg := prometheus.NewRegistry()
	a, b := counter("a_total"), counter("b_total")
	require.NoError(t, Register(reg, "zone", a, b))
	a.Inc()
	mfs, err := reg.Gather()
	require.NoError(t, err)
	assert.Len(t, mfs, 2)
}

// TestRegisterNamesPartAndEveryClash: a second component registering the
// same names gets one error naming its part and each clash, and the
// collectors that did not clash are still registered.
func TestRegisterNamesPartAndEveryClash(t *testing.T) {
	reg := prometheus.NewRegistry()
	require.NoError(t, Register(reg, "zone", counter("a_total"), counter("b_total")))
	err := Register(reg, "pipeline", counter("a_total"), counter("c_total"), counter("b_total"))
	require.Error(t, err)
	assert.Contains(t, err.Error(), "register pipeline metrics: ")
	assert.Contains(t, err.Error(), `"a_total"`)
	assert.Contains(t, err.Error(), `"b_total"`)
	var are prometheus.AlreadyRegisteredError
	assert.ErrorAs(t, err, &are)
	assert.NotContains(t, err.Error(), `"c_total"`)
	mfs, err := reg.Gather()
	require.NoError(t, err)
	assert.Len(t, mfs, 3, "c_total registered despite the clashes beside it")
}

// TestSharedReturnsTheRegisteredCollector: a second client in one process
// counts into the collector the first registered.
func TestSharedReturnsTheRegisteredCollector(t *testing.T) {
	reg := prometheus.NewRegistry()
	first, err := Shared(reg, "mqtt", counter("a_total"))
	require.NoError(t, err)
	second, err := Shared(reg, "mqtt", counter("a_total"))
	require.NoError(t, err)
	second.Inc()
	assert.Equal(t, 1.0, testutil.ToFloat64(first))

	_, err = Shared(nil, "mqtt", counter("a_total"))
	assert.NoError(t, err)

	// Same name, another kind of collector: not shareable.
	_, err = Shared[prometheus.Gauge](reg, "mqtt", prometheus.NewGauge(prometheus.GaugeOpts{Name: "a_total", Help: "test gauge"}))
	assert.ErrorContains(t, err, "register mqtt metrics: ")
}
