package zones

import (
	"bytes"
	"encoding/json"
	"fmt"
	"time"

	"etpulse/controllers"
	"etpulse/gateway/config"
	"etpulse/gateway/mqtt"
)

// forecastWire is the payload of a site's forecast topic.
type forecastWire struct {
	Issued  time.Time            `json:"issued"`
	Periods []forecastPeriodWire `json:"periods"`
}

type forecastPeriodWire struct {
	Start           time.Time `json:"start"`
	End             time.Time `json:"end"`
	EToMM           *float64  `json:"eto_mm"`
	RainMM          float64   `json:"rain_mm"`
	RainProbability *float64  `json:"rain_probability"`
	MinTempC        *float64  `json:"min_temp_c"`
}

// maxForecastPeriods bounds the periods of one forecast: 10 days of hours
// (common practice, no source).
const maxForecastPeriods = 240

// DecodeForecast decodes and checks a forecast payload. A period without
// rain_probability counts its rain as certain.
func DecodeForecast(b []byte) (*controllers.Forecast, error) {
	var w forecastWire
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&w); err != nil {
		return nil, fmt.Errorf("decode forecast: %w (want {\"issued\": RFC 3339 time, \"periods\": [{\"start\", \"end\", \"eto_mm\", \"rain_mm\", \"rain_probability\", \"min_temp_c\"}]})", err)
	}
	if len(w.Periods) > maxForecastPeriods {
		return nil, fmt.Errorf("decode forecast: periods: at most %d, got %d", maxForecastPeriods, len(w.Periods))
	}
	f := &controllers.Forecast{Issued: w.Issued}
	for _, p := range w.Periods {
		fp := controllers.ForecastPeriod{Start: p.Start, End: p.End, RainMM: p.RainMM, RainProb: 1}
		if p.EToMM != nil {
			fp.ETo, fp.HasETo = *p.EToMM, true
		}
		if p.RainProbability != nil {
			fp.RainProb = *p.RainProbability
		}
		if p.MinTempC != nil {
			fp.MinTempC, fp.HasMinTemp = *p.MinTempC, true
		}
		f.Periods = append(f.Periods, fp)
	}
	if err := f.Validate(); err != nil {
		return nil, fmt.Errorf("decode forecast: %w", err)
	}
	return f, nil
}

// onForecast keeps the latest valid forecast of a site; a bad one is
// logged and the previous one kept.
func (s *Service) onForecast(site *siteRef) func(mqtt.Message) {
	return func(m mqtt.Message) {
		defer m.Ack()
		if !s.fromTopic(m, config.ForecastTopic(s.o.TopicPrefix, site.id), "forecast", site.id) {
			return
		}
		f, err := DecodeForecast(m.Payload)
		if err != nil {
			s.log.Warn("forecast refused; the previous one is kept", "site", site.id, "topic", m.Topic, "err", err)
			return
		}
		s.SetForecast(site.id, f)
		s.log.Info("forecast received", "site", site.id, "issued", f.Issued, "periods", len(f.Periods))
		s.poke()
	}
}

// SetForecast makes f the latest forecast of site (the forecast topic's
// handler, and the backtest's forecast rows).
func (s *Service) SetForecast(site string, f *controllers.Forecast) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.forecasts == nil {
		s.forecasts = map[string]*controllers.Forecast{}
	}
	s.forecasts[site] = f
}

// forecastOf returns the latest forecast of site, if any.
func (s *Service) forecastOf(site string) *controllers.Forecast {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.forecasts[site]
}

// noteForecast warns once per forecast that the zones ignore it.
func (s *Service) noteForecast(site string, d controllers.Decision) {
	if d.ForecastIgnored == "" {
		return
	}
	s.mu.Lock()
	f := s.forecasts[site]
	warned := s.forecastWarned[site]
	if s.forecastWarned == nil {
		s.forecastWarned = map[string]*controllers.Forecast{}
	}
	s.forecastWarned[site] = f
	s.mu.Unlock()
	if warned != f {
		s.log.Warn("forecast ignored", "site", site, "why", d.ForecastIgnored)
	}
}
