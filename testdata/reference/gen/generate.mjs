// Writes independent check values for the hourly engine into ../ from two
// general-purpose libraries pinned in package.json:
//   suncalc    - sun altitude (Meeus series), solar noon and geometric
//                sunrise/sunset, compared with FAO-56 eq. 24/25/31-34 and
//                ASCE-EWRI 2005 eq. 62 in hourly/reference_test.go;
//   psychrolib - saturation vapour pressure over water (Hyland-Wexler) and
//                dew point, compared with FAO-56 eq. 11/14.
// Run: npm install && node generate.mjs
import { readFileSync, writeFileSync } from 'node:fs';
import { createRequire } from 'node:module';
import * as SunCalc from 'suncalc';

const require = createRequire(import.meta.url);
const psychrolib = require('psychrolib');
const version = (pkg) =>
  JSON.parse(readFileSync(new URL(`node_modules/${pkg}/package.json`, import.meta.url))).version;
const sunVersion = version('suncalc');
const psyVersion = version('psychrolib');
const out = new URL('../', import.meta.url);

// Sites: latitude (N+), longitude (E+), standard-time UTC offset (h).
const sites = [
  ['fao56-ex19', 16 + 13 / 60, -16.25, -1],
  ['valley-38n', 38.54, -121.76, -8],
  ['coast-34s', -33.87, 151.21, 10],
  ['polder-52n', 52.0, 5.18, 1],
  ['plain-30n-wide-zone', 30.0, 80.0, 8], // far from its zone meridian
  ['north-60n', 60.2, 11.1, 1],
];
const dates = ['2025-01-15', '2025-03-21', '2025-05-01', '2025-06-21', '2025-08-10', '2025-09-23', '2025-10-01', '2025-12-21'];
const pad = (n) => String(n).padStart(2, '0');
const fmt = (x, d) => x.toFixed(d);

// 1. Sun altitude at hour mid-points of station standard time.
let rows = ['site,lat,lon,utc_offset,hour_start_local,altitude_deg,source'];
const src = `suncalc ${sunVersion} getPosition at mid-hour (apparent altitude)`;
for (const [name, lat, lon, off] of sites) {
  for (const d of dates) {
    for (let h = 0; h < 24; h++) {
      const local = `${d}T${pad(h)}:00`;
      const midUTC = new Date(Date.parse(`${local}:00Z`) + (0.5 - off) * 3600e3);
      const alt = SunCalc.getPosition(midUTC, lat, lon).altitude;
      if (alt < 5) continue; // refraction and disc effects dominate near the horizon
      rows.push([name, fmt(lat, 4), fmt(lon, 4), off, local, fmt(alt, 4), src].join(','));
    }
  }
}
writeFileSync(new URL('suncalc_altitude.csv', out), rows.join('\n') + '\n');

// 2. Solar noon (standard clock hours) and geometric day length (sun centre at 0 deg).
SunCalc.addTime(0, 'centreRise', 'centreSet');
rows = ['site,lat,lon,utc_offset,date,solar_noon_h,daylight_h,source'];
const src2 = `suncalc ${sunVersion} getTimes solarNoon and 0-degree centre rise/set`;
for (const [name, lat, lon, off] of sites) {
  for (const d of dates) {
    const t = SunCalc.getTimes(new Date(`${d}T12:00:00Z`), lat, lon);
    const noonLocal = ((t.solarNoon.getTime() / 3600e3 + off) % 24 + 24) % 24;
    let day = '';
    if (t.centreRise && t.centreSet) day = fmt((t.centreSet - t.centreRise) / 3600e3, 4);
    rows.push([name, fmt(lat, 4), fmt(lon, 4), off, d, fmt(noonLocal, 4), day, src2].join(','));
  }
}
writeFileSync(new URL('suncalc_times.csv', out), rows.join('\n') + '\n');

// 3. Saturation vapour pressure over water and dew point.
psychrolib.SetUnitSystem(psychrolib.SI);
rows = ['t_c,es_kpa,rh_pct,dew_point_c,source'];
const src3 = `psychrolib ${psyVersion} GetSatVapPres and GetTDewPointFromRelHum (SI)`;
for (let t = 1; t <= 50; t += 1) {
  const es = psychrolib.GetSatVapPres(t) / 1000;
  const rh = 40 + ((t * 7) % 60);
  const td = psychrolib.GetTDewPointFromRelHum(t, rh / 100);
  // Below 0 degC psychrolib returns the frost point (over ice); FAO-56 eq. 11 is over water.
  rows.push([t, fmt(es, 5), rh, td > 0.5 ? fmt(td, 4) : '', src3].join(','));
}
writeFileSync(new URL('psychrolib_vapour.csv', out), rows.join('\n') + '\n');
