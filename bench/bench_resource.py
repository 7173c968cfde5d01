"""Resource stage speed: our weather years against a plain pvlib chain, side by
side in one run.

    python bench/bench_resource.py [--sites 20] [--years 10] [--plain-site-years 6]

Prints ms per site-year for

* our stage: ``fleet.resource.site_weather_from`` on the embedded grid for
  every site (sun position, clear sky, daily synthesis, hours, Erbs + Perez,
  Faiman), all weather years of a site at once;
* a plain chain a user might write with pvlib, one site-year at a time:
  ``Location.get_solarposition`` (SPA), ``Location.get_clearsky`` (Ineichen,
  given that solar position), ``irradiance.erbs``,
  ``irradiance.get_total_irradiance`` (Perez), ``temperature.faiman`` and
  ``pvsystem.pvwatts_dc``, fed with our synthetic GHI of the same site-year;

and their ratio. Sites are the first sites of the bundled demo table
(invented sites on real land coordinates); timing only.
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import pandas as pd
import pvlib

from fleet import resource

ROOT = Path(__file__).resolve().parents[1]


def plain_chain(latitude, longitude, utc_offset_hours, elevation_m, ghi_wm2,
                temp_air_c, tilt_deg, azimuth_deg):
    """One site-year through pvlib's public functions, pandas in and out."""
    tz = f"Etc/GMT{-int(utc_offset_hours):+d}" if utc_offset_hours else "UTC"
    location = pvlib.location.Location(latitude, longitude, tz=tz, altitude=elevation_m)
    times = pd.date_range("2025-01-01 00:30", periods=8760, freq="h", tz=tz)
    solar_position = location.get_solarposition(times)
    location.get_clearsky(times, model="ineichen", solar_position=solar_position)
    ghi = pd.Series(ghi_wm2, index=times)
    parts = pvlib.irradiance.erbs(ghi, solar_position["zenith"], times)
    total = pvlib.irradiance.get_total_irradiance(
        tilt_deg, azimuth_deg, solar_position["zenith"], solar_position["azimuth"],
        parts["dni"], ghi, parts["dhi"], dni_extra=pvlib.irradiance.get_extra_radiation(times),
        model="perez", albedo=0.2)
    cell = pvlib.temperature.faiman(total["poa_global"], pd.Series(temp_air_c, index=times), 1.0)
    return pvlib.pvsystem.pvwatts_dc(total["poa_global"].fillna(0.0), cell, 1000.0, -0.004)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sites", type=int, default=20)
    ap.add_argument("--years", type=int, default=10)
    ap.add_argument("--plain-site-years", type=int, default=6,
                    help="site-years run through the plain chain (it is slow)")
    args = ap.parse_args()

    table = pd.read_csv(ROOT / "sites" / "demo_sites.csv")
    step = max(1, len(table) // args.sites)
    picked = table.iloc[::step].head(args.sites)
    coordinates = list(zip(picked.latitude, picked.longitude))

    # Warm up: load the climate grid and modules on a site not in the sample.
    resource.site_weather(10.0, 20.0, n_years=1, seed=0, temp_mean_c=25.0)

    t = time.perf_counter()
    weathers = [resource.site_weather_from(resource.EMBEDDED, lat, lon, n_years=args.years,
                                           seed=i, temp_mean_c=25.0)
                for i, (lat, lon) in enumerate(coordinates)]
    ours_s = time.perf_counter() - t
    ours_ms = ours_s / (len(coordinates) * args.years) * 1000.0

    n_plain = 0
    t = time.perf_counter()
    for (lat, lon), w in zip(coordinates, weathers):
        for year in range(w.ghi_wm2.shape[0]):
            if n_plain >= args.plain_site_years:
                break
            plain_chain(lat, lon, w.utc_offset_hours, w.elevation_m, w.ghi_wm2[year].astype(float),
                        w.temp_air_c[year].astype(float), w.tilt_deg, w.azimuth_deg)
            n_plain += 1
        if n_plain >= args.plain_site_years:
            break
    plain_ms = (time.perf_counter() - t) / n_plain * 1000.0

    print(f"our resource stage: {len(coordinates)} sites x {args.years} years in {ours_s:.2f} s "
          f"= {ours_ms:.2f} ms per site-year")
    print(f"plain pvlib chain:  {n_plain} site-years, {plain_ms:.1f} ms per site-year")
    print(f"ratio: {plain_ms / ours_ms:.0f} x faster")


if __name__ == "__main__":
    main()
