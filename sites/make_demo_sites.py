"""Write the demo programme's site table, ``demo_sites.csv``, next to this script.

The programme is invented: 180 sites in two contrasting climates, a humid
equatorial highland region and a semi-arid Sahelian region. Site, district and
depot names are made up; only the coordinates are real land. Nothing here is
survey data and no test checks a value from it.

Run from anywhere::

    python sites/make_demo_sites.py

The output is the same on every run (fixed seed).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
OUTPUT = HERE / "demo_sites.csv"
SEED = 20240611

# Each district is a box (lat_min, lat_max, lon_min, lon_max) in WGS84 degrees
# chosen to lie on land, away from the large lakes of the equatorial region
# (Victoria, Albert, Edward, George, Kivu) and from the highest mountains.
REGIONS = {
    "EQ": {
        "n_sites": 100,
        "temp_mean_c": (22.0, 25.0),
        "design_temp_min_c": (12.0, 16.0),
        "districts": {
            # south-west highlands, between the small lakes
            "Amberlow": ((-1.35, -0.75), (30.05, 30.75)),
            # central-west plateau, south-east of Lake Albert
            "Fernhollow": ((0.45, 1.00), (30.60, 31.50)),
            # plains north of Lake Victoria's shore, south of Lake Kyoga
            "Kestrel Vale": ((0.55, 1.30), (31.80, 32.40)),
        },
        "depot_of": {"Amberlow": "Cedar Yard", "Fernhollow": "Cedar Yard", "Kestrel Vale": "Heron Yard"},
    },
    "SA": {
        "n_sites": 80,
        "temp_mean_c": (27.0, 31.0),
        "design_temp_min_c": (8.0, 14.0),
        "districts": {
            "Dunmere": ((12.50, 15.00), (1.00, 2.15)),
            "Saltreach": ((12.50, 15.00), (2.15, 3.30)),
            "Ochre Flats": ((12.50, 15.00), (3.30, 4.50)),
        },
        "depot_of": {"Dunmere": "Dune Yard", "Saltreach": "Dune Yard", "Ochre Flats": "Dune Yard"},
    },
}

MINIGRID_SHARE = 0.30
N_BLANK_TEMPERATURES = 10
N_BLANK_DESIGN_MINIMUM = 5

# Invented names: syllables picked to sound like no language of either
# region, so that a name is unlikely to be a real place there.
_ONSETS = ["br", "cl", "dr", "fl", "gr", "pl", "st", "tr", "v", "th", "qu", "sh"]
_VOWELS = ["a", "e", "i", "o", "u"]
_CODAS = ["lv", "rn", "nd", "sk", "lm", "rk"]
_ENDINGS = ["wick", "mere", "holt", "stead", "combe", "ley"]


def invented_names(rng: np.random.Generator, n: int) -> list[str]:
    """n distinct pronounceable invented place names."""
    names: list[str] = []
    seen: set[str] = set()
    while len(names) < n:
        name = (
            rng.choice(_ONSETS) + rng.choice(_VOWELS) + rng.choice(_CODAS) + rng.choice(_ENDINGS)
        ).capitalize()
        if name not in seen:
            seen.add(name)
            names.append(name)
    return names


def split_households(rng: np.random.Generator, total: int, shares: list[float]) -> np.ndarray:
    """Split a site's households over the five tiers."""
    return rng.multinomial(total, np.asarray(shares) / np.sum(shares))


def make_sites(seed: int = SEED) -> pd.DataFrame:
    """The demo site table as a DataFrame (one row a site)."""
    rng = np.random.default_rng(seed)
    n_total = sum(r["n_sites"] for r in REGIONS.values())
    names = iter(invented_names(rng, n_total))
    rows = []
    for prefix, region in REGIONS.items():
        n = region["n_sites"]
        districts = list(region["districts"])
        # Deal the districts round so each gets a fair share of sites.
        district_of = [districts[i % len(districts)] for i in rng.permutation(n)]
        n_minigrid = round(MINIGRID_SHARE * n)
        is_minigrid = np.zeros(n, dtype=bool)
        is_minigrid[rng.choice(n, size=n_minigrid, replace=False)] = True
        for i in range(n):
            district = district_of[i]
            (lat0, lat1), (lon0, lon1) = region["districts"][district]
            minigrid = bool(is_minigrid[i])
            if minigrid:
                # log-uniform between 40 and 400 households: many small grids, a few large
                total = int(round(np.exp(rng.uniform(np.log(40), np.log(400)))))
                tiers = split_households(rng, total, [0.38, 0.34, 0.20, 0.06, 0.02])
                productive = round(float(rng.uniform(5, 40)), 1) if rng.random() < 0.6 else 0.0
                health_posts = int(rng.random() < 0.45)
                schools = int(rng.integers(0, 3))
            else:
                total = int(rng.integers(5, 61))
                tiers = split_households(rng, total, [0.45, 0.35, 0.17, 0.03, 0.0])
                productive = 0.0
                health_posts = int(rng.random() < 0.10)
                schools = int(rng.integers(0, 2)) if rng.random() < 0.3 else 0
            rows.append(
                {
                    "site_id": f"{prefix}-{i + 1:03d}",
                    "site_name": next(names),
                    "district": district,
                    "depot": region["depot_of"][district],
                    "latitude": round(float(rng.uniform(lat0, lat1)), 5),
                    "longitude": round(float(rng.uniform(lon0, lon1)), 5),
                    "scheme": "minigrid" if minigrid else "shs",
                    **{f"households_t{k + 1}": int(tiers[k]) for k in range(5)},
                    "health_posts": health_posts,
                    "schools": schools,
                    "productive_kwh_day": productive,
                    "temp_mean_c": round(float(rng.uniform(*region["temp_mean_c"])), 1),
                    "design_temp_min_c": round(float(rng.uniform(*region["design_temp_min_c"])), 1),
                    "survey_round": f"R{int(rng.integers(1, 3))}",
                }
            )
    sites = pd.DataFrame(rows)
    # Some sites without temperatures, so that programme defaults get used.
    blank = rng.choice(len(sites), size=N_BLANK_TEMPERATURES, replace=False)
    sites.loc[blank, "temp_mean_c"] = np.nan
    sites.loc[blank[:N_BLANK_DESIGN_MINIMUM], "design_temp_min_c"] = np.nan
    # Street lights at minigrid villages and water pumping (a deferrable load) at some
    # sites, drawn from a second stream so the columns above stay as they were.
    extra = np.random.default_rng(20261202)
    mg = sites.scheme == "minigrid"
    sites.insert(sites.columns.get_loc("productive_kwh_day") + 1, "street_lights",
                 np.where(mg, extra.integers(0, 13, len(sites)), 0))
    sites.insert(sites.columns.get_loc("street_lights") + 1, "pumping_kwh_day",
                 np.where(extra.random(len(sites)) < 0.15, np.round(extra.uniform(1.0, 8.0, len(sites)), 1), 0.0))
    kinds = np.array(["workshop", "mill", "welding", "cold_storage"])
    sites.insert(sites.columns.get_loc("productive_kwh_day") + 1, "productive_kind",
                 np.where(sites.productive_kwh_day > 0, kinds[extra.integers(0, 4, len(sites))], ""))
    return sites


def check(sites: pd.DataFrame) -> None:
    """Fail loudly if the scenario lost a feature the demo relies on."""
    tiers = [f"households_t{k}" for k in range(1, 6)]
    assert (sites[tiers].sum() > 0).all(), "every tier must appear"
    for prefix in REGIONS:
        schemes = set(sites.loc[sites["site_id"].str.startswith(prefix), "scheme"])
        assert schemes == {"shs", "minigrid"}, f"region {prefix} needs both schemes"
    assert sites["site_name"].is_unique and sites["site_id"].is_unique


def main() -> Path:
    sites = make_sites()
    check(sites)
    sites.to_csv(OUTPUT, index=False)
    # Validate with the package when it is importable (run from the repository).
    sys.path.insert(0, str(HERE.parent))
    try:
        from fleet.sites import read_sites
    except ImportError:
        pass
    else:
        read_sites(OUTPUT)
    print(OUTPUT)
    return OUTPUT


if __name__ == "__main__":
    main()
