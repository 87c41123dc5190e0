package ingest_test

import (
	"fmt"
	"time"

	"etpulse/gateway/config"
	"etpulse/gateway/ingest"
)

// The four payload formats of an invented station, "Wrenfield" east mast.
func ExampleRouter_Route() {
	cfg, err := config.Parse([]byte(`
sites:
  - id: wrenfield
    stations:
      - id: east
        latitude: 45.2
        longitude: -0.6
        sensors:
          - {id: t, topic: wren/east/t, format: number, quantity: air_temp, unit: degF}
          - {id: u, topic: wren/east/u, format: json, quantity: wind, unit: km/h}
          - id: obs
            topic: wren/east/obs
            format: fields
            fields:
              rh: {quantity: rel_humidity, unit: "%"}
              rs: {quantity: solar, unit: W/m2}
          - id: pack
            topic: wren/east/senml
            format: senml
            records:
              "east:rain": {quantity: rain, unit: mm}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	r, err := ingest.NewRouter(cfg)
	if err != nil {
		fmt.Println(err)
		return
	}
	arrival := time.Date(2026, 7, 1, 12, 0, 5, 0, time.UTC)
	for _, m := range []struct{ topic, payload string }{
		{"wren/east/t", "77"},
		{"wren/east/u", `{"value": 18, "time": "2026-07-01T11:59:00Z"}`},
		{"wren/east/obs", `{"time": 1782907140, "rh": 41.5, "rs": 820, "lux": 90000}`},
		{"wren/east/senml", `[{"bn": "east:", "bt": 1782907200, "n": "rain", "v": 0.2}]`},
	} {
		readings, rejections := r.Route(m.topic, []byte(m.payload), arrival)
		for _, rd := range readings {
			s := rd.Sample
			fmt.Printf("%s %-9s %-13s %6.2f at %s\n", rd.Station, s.Sensor, s.Quantity, s.Value, s.Time.Format("15:04:05"))
		}
		for _, rj := range rejections {
			fmt.Println("rejected:", rj)
		}
	}
	// Output:
	// east t         air_temp       25.00 at 12:00:05
	// east u         wind            5.00 at 11:59:00
	// east obs.rh    rel_humidity   41.50 at 11:59:00
	// east obs.rs    solar         820.00 at 11:59:00
	// rejected: unknown_field: wrenfield/east/obs: field "lux" is not mapped in fields or listed in ignore
	// east pack.east:rain rain            0.20 at 12:00:00
}
