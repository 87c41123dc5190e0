package hourcsv

import (
	"fmt"

	"etpulse/hourly"
)

// DailyET returns the reference ET of day d by the daily equation
// (hourly.Daily: FAO-56 eq. 6 / ASCE-EWRI 2005 daily constants), from the
// day's aggregates: Tmax and Tmin of the hourly means, the mean of the hourly
// ea, the mean wind at 2 m, the sum of Rs and G = 0 (FAO-56 eq. 42). It is
// meant for comparison with the sum of the hours. Hourly means smooth the
// true extremes, so Tmax-Tmin is a little narrower than a max/min
// thermometer's.
func DailyET(st hourly.Station, ref hourly.Reference, d Day) (float64, error) {
	r, err := hourly.Daily(st, ref, hourly.DayWeather{
		Date:     d.Date,
		TMax:     d.TMax,
		TMin:     d.TMin,
		Humidity: hourly.HumidityEa,
		Ea:       d.Ea,
		Wind2:    d.Wind2,
		Solar:    d.Solar,
	})
	if err != nil {
		return 0, fmt.Errorf("daily equation: %w", err)
	}
	return r.ET, nil
}
