package main

import (
	"testing"

	"github.com/stretchr/testify/assert"
)

func TestCount(t *testing.T) {
	assert.Equal(t, "0 gaps", count(0, "gap", "gaps"))
	assert.Equal(t, "1 gap", count(1, "gap", "gaps"))
	assert.Equal(t, "2 bad rows", count(2, "bad row", "bad rows"))
}
