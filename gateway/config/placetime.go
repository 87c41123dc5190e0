package config

import (
	"fmt"
	"math"
)

// MaxMeridianDistance is how far, in degrees of longitude, a station may lie
// from the meridian of its standard UTC offset (15° per hour) before the
// place and time look inconsistent. Time zones are about 15° wide but follow
// borders, so stations 10-25° from their meridian are real; 30° is common
// practice, no source, chosen to catch a flipped sign or offset.
const MaxMeridianDistance = 30.0

// DaylightSavingDistance is how far west of its offset's meridian, in
// degrees, a station must lie before an offset one hour ahead of its
// longitude is taken for daylight-saving time. A summer offset puts a
// station 7.5-22.5° west of the meridian; standard zones stretched west
// (eastern Australia at +10, the US mountain states at -7) stay within
// about 10°. Common practice, no source.
const DaylightSavingDistance = 10.0

// PlaceTimeWarning checks a station's longitude (degrees, east positive)
// against its standard-time UTC offset (hours) and returns the name of the
// setting at fault (lonName or offsetName, as the caller spells them:
// "longitude" and "utc_offset_hours" in the configuration, "--lon" and
// "--utc-offset" in calc) and a message naming the fix that would make the
// pair plausible, or "" when the pair is plausible.
//
// Two rules, both common practice, no source:
//   - the station lies more than MaxMeridianDistance from the meridian of
//     its offset (15° x offset): when the longitude with its sign flipped
//     fits, that is suggested, else the offset nearest the longitude;
//   - the offset is exactly one hour ahead (east) of the whole-hour offset
//     nearest longitude/15 and the station lies more than
//     DaylightSavingDistance west of the offset's meridian: the offset is
//     likely the daylight-saving (summer) one. Places whose standard time
//     is that far ahead of their longitude (much of western Europe, parts
//     of South America) see this warning too, which is why it says what to
//     do in either case.
func PlaceTimeWarning(lon, offset float64, lonName, offsetName string) (field, message string) {
	d := meridianDistance(lon, offset)
	if math.Abs(d) > MaxMeridianDistance {
		far := fmt.Sprintf("%s° from that offset's meridian (%s°)", fmtF(math.Round(math.Abs(d)*10)/10), fmtF(15*offset))
		// Flipping the longitude's sign and flipping the offset's are
		// equivalent tests; the longitude is named first, since west
		// positive is the other common convention.
		if math.Abs(meridianDistance(-lon, offset)) <= MaxMeridianDistance {
			return lonName, fmt.Sprintf("%s %s with %s %s is %s: did you mean %s? (east positive; a station really at %s has a standard offset near %s)",
				lonName, fmtF(lon), offsetName, fmtF(offset), far, fmtF(-lon), fmtF(lon), fmtF(nearestOffset(lon)))
		}
		return offsetName, fmt.Sprintf("%s %s with %s %s is %s; the whole-hour offset nearest that longitude is %s: check both (longitude east positive, offset of standard time)",
			offsetName, fmtF(offset), lonName, fmtF(lon), far, fmtF(nearestOffset(lon)))
	}
	if n := nearestOffset(lon); offset == n+1 && d < -DaylightSavingDistance {
		return offsetName, fmt.Sprintf("%s %s is one hour ahead of %s, the standard offset nearest %s %s: if %s is the daylight-saving (summer) offset, use the standard offset %s; if it is the standard time there all year, ignore this warning",
			offsetName, fmtF(offset), fmtF(n), lonName, fmtF(lon), fmtF(offset), fmtF(n))
	}
	return "", ""
}

// meridianDistance is lon minus the meridian of offset, degrees within
// [-180, 180).
func meridianDistance(lon, offset float64) float64 {
	d := math.Mod(lon-15*offset+180, 360)
	if d < 0 {
		d += 360
	}
	return d - 180
}

// nearestOffset is the whole-hour UTC offset whose meridian is nearest lon.
func nearestOffset(lon float64) float64 {
	n := math.Round(lon / 15)
	if n == -0 {
		n = 0
	}
	return n
}

// placeTimeWarnings adds a warning for each station whose longitude and UTC
// offset do not fit together.
func (c *Config) placeTimeWarnings(p *Problems) {
	for i := range c.Sites {
		for j := range c.Sites[i].Stations {
			st := &c.Sites[i].Stations[j]
			if field, msg := PlaceTimeWarning(st.Longitude, st.UTCOffset, "longitude", "utc_offset_hours"); msg != "" {
				p.Add(fmt.Sprintf("sites[%d].stations[%d].%s", i, j, field), msg)
			}
		}
	}
}
