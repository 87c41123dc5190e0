package main

import (
	"testing"

	"github.com/stretchr/testify/assert"
)

// check prints the derived numbers of partial cover, wetting, deficit
// stages, salinity and the greenhouse reference.
func TestCheckOrchardSummary(t *testing.T) {
	out := checkValid(t, "../../testdata/zones/young-orchard.yaml")
	for _, want := range []string{
		// 120 mm/m x 1 m x fw 0.35 (FAO-56 eq. 82, Table 20 drip, from memory); RAW 0.5 x 42.
		"TAW 42 mm (root depth 1 m), RAW 21 mm (p 0.5), trigger 21 mm (RAW)",
		// Mid-season: cover 0.28 on day 135 of the curve 0.10 (04-01) -> 0.30
		// (07-01) -> 0.25 (10-15); Kd = min(1, 2 x 0.28, 0.28^(1/3.5)) = 0.56;
		// Kc = 0.15 + 0.56 x (0.95 - 0.15) = 0.60 (Allen and Pereira 2009,
		// FAO-56 eq. 98 form).
		"mid 0.95 -> 0.6 (cover 0.28)",
		"wetted fraction 0.35 (FAO-56 Table 20 typical for drip, from memory)",
		"deficit stage post-harvest 09-01 to 10-31: each run puts back 60 % of the crop ET since the last run (intended deficit 40 %)",
		// FAO-29 LR = 1.2 / (5 x 1.7 - 1.2) = 0.164; 1 / (1 - 0.164) = 1.2.
		"leaching fraction 0.164 (FAO-29 LR = ECw / (5 ECe - ECw)), each run x 1.2",
		"zone tomato-bay  station glasshouse",
		"greenhouse: the inside station's reference ET (station glasshouse); Kc is the grower's own figure",
	} {
		assert.Contains(t, out, want)
	}
}
