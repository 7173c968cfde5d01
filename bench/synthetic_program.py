"""Invented site tables of any size, for scale benchmarks.

    python bench/synthetic_program.py N out.csv [--seed 0] [--depots out_depots.csv]

Writes ``N`` invented sites with the columns of ``sites/demo_sites.csv`` and,
with ``--depots``, a matching depots table (``depot,latitude,longitude``).
Everything here is invented except that the coordinates are real land: sites
are drawn inside fixed boxes (WGS84 degrees) chosen on land, away from large
lakes, reservoirs and swamps and from the coast. Each box is one district with
one depot at its centre. The mixes follow the demo program
(``sites/make_demo_sites.py``): 30 % minigrid sites, households split over the
five tiers with the demo's shares, health posts, schools, productive loads,
street lights, water pumping, and a few sites without temperatures so that
program defaults get used. Names are made from syllables picked to sound like
no language of the regions. Nothing here is survey data and no test checks a
value from it.

The same ``n_sites`` and ``seed`` give the same table.
"""

from __future__ import annotations

import argparse
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

#: Demo program mixes (see sites/make_demo_sites.py).
MINIGRID_SHARE = 0.30
TIER_SHARES = {
    "minigrid": np.array([0.38, 0.34, 0.20, 0.06, 0.02]),
    "shs": np.array([0.45, 0.35, 0.17, 0.03, 0.0]),
}
MINIGRID_HOUSEHOLDS = (40, 400)  # log-uniform: many small grids, a few large
SHS_HOUSEHOLDS = (5, 60)  # uniform whole numbers, inclusive
PRODUCTIVE_SHARE_MINIGRID = 0.6
PRODUCTIVE_KWH_DAY = (5.0, 40.0)
PRODUCTIVE_KINDS = np.array(["workshop", "mill", "welding", "cold_storage"])
HEALTH_POST_SHARE = {"minigrid": 0.45, "shs": 0.10}
PUMPING_SHARE = 0.15
PUMPING_KWH_DAY = (1.0, 8.0)
MAX_STREET_LIGHTS = 12
#: Share of sites without ``temp_mean_c`` (half of those also without ``design_temp_min_c``).
BLANK_TEMPERATURE_SHARE = 10 / 180


@dataclass(frozen=True)
class LandBox:
    """A district: a box on land (degrees), its depot and its climate ranges (degC)."""

    code: str
    district: str
    depot: str
    lat_deg: tuple[float, float]
    lon_deg: tuple[float, float]
    temp_mean_c: tuple[float, float]
    design_temp_min_c: tuple[float, float]

    @property
    def centre(self) -> tuple[float, float]:
        return (round(sum(self.lat_deg) / 2, 3), round(sum(self.lon_deg) / 2, 3))


# The first six are the demo's boxes (equatorial highlands between the lakes
# Victoria, Albert, Edward, George, Kivu and Kyoga; the Sahel at 12.5-15 N,
# 1-4.5 E). The last four are interior plateaus or savanna, clear of large
# water bodies: central Tanzania west of Dodoma and west of the Mtera
# reservoir; eastern Zambia's plateau west of Chipata; Angola's central
# plateau around Huambo; northern Ghana south of the
# Tono and Vea reservoirs. The four new boxes are placed from memory of the
# maps (# from memory), not checked against a coastline or lake data set; every
# box's sites get their own cell of the embedded resource grid. District and
# depot names are invented.
BOXES: tuple[LandBox, ...] = (
    LandBox("EQA", "Vornhalde", "Vornhalde Yard", (-1.35, -0.75), (30.05, 30.75), (22.0, 25.0), (12.0, 16.0)),
    LandBox("EQB", "Quelmstead", "Quelmstead Yard", (0.45, 1.00), (30.60, 31.50), (22.0, 25.0), (12.0, 16.0)),
    LandBox("EQC", "Drusk Plain", "Drusk Yard", (0.55, 1.30), (31.80, 32.40), (22.0, 25.0), (12.0, 16.0)),
    LandBox("SAA", "Thelvmark", "Thelvmark Yard", (12.50, 15.00), (1.00, 2.15), (27.0, 31.0), (8.0, 14.0)),
    LandBox("SAB", "Brosk Reach", "Brosk Yard", (12.50, 15.00), (2.15, 3.30), (27.0, 31.0), (8.0, 14.0)),
    LandBox("SAC", "Flarnholt", "Flarnholt Yard", (12.50, 15.00), (3.30, 4.50), (27.0, 31.0), (8.0, 14.0)),
    LandBox("CPA", "Strelmcombe", "Strelmcombe Yard", (-7.30, -6.50), (34.40, 35.20), (21.0, 24.0), (10.0, 15.0)),
    LandBox("ZPA", "Grulvwick", "Grulvwick Yard", (-14.20, -13.30), (31.50, 32.60), (20.0, 24.0), (6.0, 12.0)),
    LandBox("APA", "Plorndale", "Plorndale Yard", (-13.30, -12.30), (15.20, 16.40), (17.0, 21.0), (3.0, 9.0)),
    LandBox("GSA", "Shelkmere", "Shelkmere Yard", (9.80, 10.60), (-1.60, -0.40), (27.0, 30.0), (14.0, 19.0)),
)

COLUMNS = (
    "site_id", "site_name", "district", "depot", "latitude", "longitude", "scheme",
    "households_t1", "households_t2", "households_t3", "households_t4", "households_t5",
    "health_posts", "schools", "productive_kwh_day", "productive_kind", "street_lights",
    "pumping_kwh_day", "temp_mean_c", "design_temp_min_c", "survey_round",
)

# Syllables of the invented names. Word-initial clusters such as dv, kv, tl, zl
# and gv are rare in the languages of the regions (and in English, whose place
# names would otherwise come up), so a name is unlikely to be a real place.
# With an optional middle syllable they give over a hundred thousand names.
_ONSETS = np.array(["dv", "kv", "tl", "vr", "zl", "gv", "sk", "br", "fl", "pr"])
_VOWELS = np.array(["a", "e", "i", "o", "u"])
_CODAS = np.array(["lv", "rn", "nd", "sk", "lm", "rk", "ld", "rv"])
_ENDINGS = np.array(["avel", "enor", "ist", "omar", "ulk", "ett", "iq", "orv"])


def invented_names(rng: np.random.Generator, n: int) -> np.ndarray:
    """``n`` distinct pronounceable invented place names, in draw order."""
    names: list[str] = []
    seen: set[str] = set()
    while len(names) < n:
        m = 2 * (n - len(names)) + 16
        two = rng.random(m) < 0.5  # a middle syllable on half of them
        first = (_ONSETS[rng.integers(0, len(_ONSETS), m)].astype(object)
                 + _VOWELS[rng.integers(0, len(_VOWELS), m)] + _CODAS[rng.integers(0, len(_CODAS), m)])
        middle = _VOWELS[rng.integers(0, len(_VOWELS), m)].astype(object) + _CODAS[rng.integers(0, len(_CODAS), m)]
        end = _ENDINGS[rng.integers(0, len(_ENDINGS), m)]
        for name in first + np.where(two, middle, "") + end:
            name = name.capitalize()
            if name not in seen:
                seen.add(name)
                names.append(name)
                if len(names) == n:
                    break
    return np.array(names, dtype=object)


def make_program(n_sites: int, seed: int = 0, boxes: tuple[LandBox, ...] = BOXES) -> pd.DataFrame:
    """An invented program of ``n_sites`` sites (one row a site, the demo's columns).

    Sites are dealt round the land boxes so that each gets ``n_sites / len(boxes)``
    (give or take one); ``round(0.3 * n_sites)`` of them are minigrid sites.
    Deterministic in ``(n_sites, seed)``.
    """
    if int(n_sites) != n_sites or n_sites < 1:
        raise ValueError(f"n_sites must be a whole number >= 1, got {n_sites!r}")
    n = int(n_sites)
    rng = np.random.default_rng(seed)
    box = rng.permutation(np.arange(n) % len(boxes))
    lat0 = np.array([b.lat_deg[0] for b in boxes])[box]
    lat1 = np.array([b.lat_deg[1] for b in boxes])[box]
    lon0 = np.array([b.lon_deg[0] for b in boxes])[box]
    lon1 = np.array([b.lon_deg[1] for b in boxes])[box]
    minigrid = np.zeros(n, dtype=bool)
    minigrid[rng.choice(n, size=round(MINIGRID_SHARE * n), replace=False)] = True

    lo, hi = np.log(MINIGRID_HOUSEHOLDS[0]), np.log(MINIGRID_HOUSEHOLDS[1])
    total = np.where(minigrid, np.rint(np.exp(rng.uniform(lo, hi, n))).astype(int),
                     rng.integers(SHS_HOUSEHOLDS[0], SHS_HOUSEHOLDS[1] + 1, n))
    tiers = np.empty((n, 5), dtype=int)
    for scheme, rows in (("minigrid", minigrid), ("shs", ~minigrid)):
        if rows.any():
            tiers[rows] = rng.multinomial(total[rows], TIER_SHARES[scheme] / TIER_SHARES[scheme].sum())

    u = rng.random((n, 4))
    productive = np.where(minigrid & (u[:, 0] < PRODUCTIVE_SHARE_MINIGRID),
                          np.round(rng.uniform(*PRODUCTIVE_KWH_DAY, n), 1), 0.0)
    kind = np.where(productive > 0, PRODUCTIVE_KINDS[rng.integers(0, len(PRODUCTIVE_KINDS), n)], "")
    health = (u[:, 1] < np.where(minigrid, HEALTH_POST_SHARE["minigrid"], HEALTH_POST_SHARE["shs"])).astype(int)
    schools = np.where(minigrid, rng.integers(0, 3, n), np.where(u[:, 2] < 0.3, rng.integers(0, 2, n), 0))
    lights = np.where(minigrid, rng.integers(0, MAX_STREET_LIGHTS + 1, n), 0)
    pumping = np.where(u[:, 3] < PUMPING_SHARE, np.round(rng.uniform(*PUMPING_KWH_DAY, n), 1), 0.0)

    t_lo = np.array([b.temp_mean_c[0] for b in boxes])[box]
    t_hi = np.array([b.temp_mean_c[1] for b in boxes])[box]
    m_lo = np.array([b.design_temp_min_c[0] for b in boxes])[box]
    m_hi = np.array([b.design_temp_min_c[1] for b in boxes])[box]
    temp_mean = np.round(rng.uniform(t_lo, t_hi), 1)
    temp_min = np.round(rng.uniform(m_lo, m_hi), 1)
    blank = rng.choice(n, size=round(BLANK_TEMPERATURE_SHARE * n), replace=False)
    temp_mean[blank] = np.nan
    temp_min[blank[: len(blank) // 2]] = np.nan

    # Ids count up within each box: EQA-0001, EQA-0002, ...
    per_box = np.bincount(box, minlength=len(boxes))
    width = max(3, len(str(int(per_box.max()))))
    order = np.argsort(box, kind="stable")
    number = np.empty(n, dtype=int)
    number[order] = np.concatenate([np.arange(1, c + 1) for c in per_box])
    codes = np.array([b.code for b in boxes], dtype=object)[box]
    site_id = [f"{c}-{k:0{width}d}" for c, k in zip(codes, number)]

    sites = pd.DataFrame({
        "site_id": site_id,
        "site_name": invented_names(rng, n),
        "district": np.array([b.district for b in boxes], dtype=object)[box],
        "depot": np.array([b.depot for b in boxes], dtype=object)[box],
        "latitude": np.round(rng.uniform(lat0, lat1), 5),
        "longitude": np.round(rng.uniform(lon0, lon1), 5),
        "scheme": np.where(minigrid, "minigrid", "shs"),
        **{f"households_t{k + 1}": tiers[:, k] for k in range(5)},
        "health_posts": health,
        "schools": schools,
        "productive_kwh_day": productive,
        "productive_kind": kind,
        "street_lights": lights,
        "pumping_kwh_day": pumping,
        "temp_mean_c": temp_mean,
        "design_temp_min_c": temp_min,
        "survey_round": np.char.add("R", rng.integers(1, 3, n).astype(str)),
    })
    return sites[list(COLUMNS)]


def make_depots(sites: pd.DataFrame, boxes: tuple[LandBox, ...] = BOXES) -> pd.DataFrame:
    """Depots (``depot``, ``latitude``, ``longitude``; each at its box's centre, on land)
    named in ``sites``."""
    used = set(sites["depot"])
    rows = [{"depot": b.depot, "latitude": b.centre[0], "longitude": b.centre[1]} for b in boxes if b.depot in used]
    return pd.DataFrame(rows, columns=["depot", "latitude", "longitude"])


def check(sites: pd.DataFrame, boxes: tuple[LandBox, ...] = BOXES) -> None:
    """Fail loudly if a table lost a property the benchmarks rely on."""
    assert sites["site_id"].is_unique and sites["site_name"].is_unique
    inside = np.zeros(len(sites), dtype=bool)
    for b in boxes:
        inside |= (sites.latitude.between(*b.lat_deg) & sites.longitude.between(*b.lon_deg)).to_numpy()
    assert inside.all(), "every site lies in a land box"
    if len(sites) >= 20:
        assert set(sites.scheme) == {"shs", "minigrid"}


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter, epilog=__doc__)
    ap.add_argument("n_sites", type=int, help="number of sites")
    ap.add_argument("out_csv", type=Path, help="site table to write (CSV)")
    ap.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    ap.add_argument("--depots", type=Path, default=None, help="also write the depots table (CSV) here")
    args = ap.parse_args(argv)
    if args.n_sites < 1:
        ap.error("N must be >= 1")
    sites = make_program(args.n_sites, seed=args.seed)
    check(sites)
    sites.to_csv(args.out_csv, index=False)
    written = [args.out_csv]
    if args.depots is not None:
        make_depots(sites).to_csv(args.depots, index=False)
        written.append(args.depots)
    # Validate with the package when it is importable (run from the repository).
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    try:
        from fleet.sites import read_sites
        from fleet.transport import read_depots
    except ImportError:
        pass
    else:
        read_sites(args.out_csv)
        if args.depots is not None:
            read_depots(args.depots)
    for path in written:
        print(path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
