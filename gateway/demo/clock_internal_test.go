package demo

import (
	"testing"

	"github.com/stretchr/testify/assert"
)

func TestFuncPackage(t *testing.T) {
	assert.Equal(t, "etpulse/gateway/zones", funcPackage("etpulse/gateway/zones.(*Service).Run"))
	assert.Equal(t, "etpulse/gateway", funcPackage("etpulse/gateway.(*Gateway).intake.func1"))
	assert.Equal(t, "main", funcPackage("main.main"))
	assert.Equal(t, "etpulse/gateway/demo", thisPackage)
}
