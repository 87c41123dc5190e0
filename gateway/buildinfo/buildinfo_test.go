package buildinfo

import (
	"runtime"
	"strings"
	"testing"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/testutil"
	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

func TestReadStamp(t *testing.T) {
	i := Read("v1.4.0-3-gabc1234", "abc1234def")
	assert.Equal(t, "v1.4.0-3-gabc1234", i.Version, "the -ldflags -X stamp wins")
	assert.Equal(t, "abc1234def", i.Revision)
	assert.Equal(t, runtime.Version(), i.GoVersion)
	assert.NotEmpty(t, i.Revision)
	j := Read("", "")
	assert.NotEmpty(t, j.Version, "without a stamp: the module version or (devel)")
	assert.NotEmpty(t, j.Revision, "the VCS revision, or unknown")
	assert.Equal(t, "etpulse "+i.Version+" (revision "+i.Revision+", "+runtime.Version()+")", i.String())
}

// TestRegister: etpulse_build_info{version,revision,goversion} = 1.
func TestRegister(t *testing.T) {
	reg := prometheus.NewRegistry()
	info := Info{Version: "v1.4.0", Revision: "abc1234", GoVersion: "go1.26.0"}
	require.NoError(t, Register(reg, info))
	want := `# HELP etpulse_build_info Always 1; the labels name the running build: version (release tag or -ldflags stamp), VCS revision and Go version.
# TYPE etpulse_build_info gauge
etpulse_build_info{goversion="go1.26.0",revision="abc1234",version="v1.4.0"} 1
`
	require.NoError(t, testutil.GatherAndCompare(reg, strings.NewReader(want), "etpulse_build_info"))
	assert.Error(t, Register(reg, info), "a second registration is refused")
	assert.NoError(t, Register(nil, Info{}), "no registry, no metric")
}
