package controllers

import (
	"testing"

	"github.com/stretchr/testify/assert"
	"github.com/stretchr/testify/require"
)

// A planned command that expired without ever being sent (the gateway was
// down at its start) never ran: it must not eat the day's cap.
func TestDecideNeverSentExpiredNotCharged(t *testing.T) {
	z := maizeZone()
	z.System.MaxMinutes = 240
	z.System.MaxPerDay = 300
	now := at(1, 22, 0)
	st := withWeather(&State{Depletion: 80}, now)
	unsent := Command{ID: "unsent", Zone: z.ID, Minutes: 240, Start: at(1, 21, 1), Expiry: at(1, 21, 16),
		State: Expired, Note: "not sent before expiry (gateway down)"}
	p := Decide(now, []ZoneInput{{z, st}}, nil, []Command{unsent}, Holds{})
	require.Len(t, p.Commands, 1)
	assert.Equal(t, 240, p.Commands[0].Minutes, "the full run: nothing ran today")

	// Once sent (Attempts > 0) an expired command may have run: it counts
	// in full (and the zone is not watered again in this window).
	sent := unsent
	sent.Attempts = 1
	assert.Equal(t, 240, sent.chargedMinutes())
}
