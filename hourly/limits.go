package hourly

// Bounds of a station description. Station.Validate and WindFactor enforce
// them; the configuration and the calc command translate them to their own
// field and flag names and never restate the numbers.
const (
	// MinLatitude and MaxLatitude bound a station latitude, degrees north
	// positive.
	MinLatitude, MaxLatitude = -90.0, 90.0
	// MinLongitude and MaxLongitude bound a station longitude, degrees east
	// positive.
	MinLongitude, MaxLongitude = -180.0, 180.0
	// MinElevation and MaxElevation bound a station elevation, m above sea
	// level. They catch typos such as an elevation in feet rather than
	// physical impossibilities (common practice, no source); FAO-56 eq. 7
	// gives about 107 and 31 kPa at them, inside MinPressure..MaxPressure.
	MinElevation, MaxElevation = -500.0, 9000.0
	// MinUTCOffset and MaxUTCOffset bound the UTC offset of a station's
	// standard time, hours: the civil offsets in use run from UTC-12 to
	// UTC+14 (from memory).
	MinUTCOffset, MaxUTCOffset = -12.0, 14.0
	// MinWindHeight and MaxWindHeight bound the height of a wind sensor
	// above ground, m, that WindFactor adjusts to 2 m by FAO-56 eq. 47
	// (common practice, no source: the logarithmic profile is meant for
	// heights of a few metres).
	MinWindHeight, MaxWindHeight = 0.5, 100.0
	// MinTurbidity and MaxTurbidity bound a given Station.Turbidity Kt:
	// 1.0 for clean air, 0.5 for extremely turbid, dusty or polluted air
	// (ASCE-EWRI 2005 Appendix D, eq. D.2; from memory).
	MinTurbidity, MaxTurbidity = 0.5, 1.0
)
