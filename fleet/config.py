"""Program configuration (TOML) with defaults and validation.

A program file only needs the keys it changes: everything else comes from the
bundled demo program (``fleet/data/demo_program.toml``). Unknown sections or
keys are reported, because a misspelt key silently ignored is a wrong plan.

The depots table named by ``transport.depots_file`` (a path relative to the
program file that names it) is read with the program and kept in
:attr:`ProgramConfig.depots`. It belongs to that file: a program file that
names none does not inherit the bundled demo's depots, and gets no transport
cost (which the plan states in its warnings).
"""

from __future__ import annotations

import copy
import tomllib
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path
from typing import Any

from .errors import InputError, Problem

#: (section, key) -> (type, lower bound, upper bound, unit); bounds inclusive, None = open.
SCHEMA: dict[tuple[str, str], tuple[type, float | None, float | None, str]] = {
    ("program", "name"): (str, None, None, ""),
    ("program", "reliability_target"): (float, 0.0, 1.0, "fraction of demand unmet"),
    ("program", "target_confidence"): (float, 0.5, 1.0, "weather-year quantile"),
    ("program", "weather_years"): (int, 1, 200, "years"),
    ("program", "seed"): (int, 0, None, ""),
    ("program", "horizon_years"): (int, 1, 50, "years"),
    ("program", "discount_rate"): (float, 0.0, 0.5, "per year"),
    ("program", "design_year"): (int, 0, 50, "years after connection"),
    ("program", "critical_reliability_target"): (float, 0.0, 1.0, "fraction of critical demand unmet"),
    ("program", "deferrable_reliability_target"): (float, 0.0, 1.0, "fraction of deferrable demand unmet"),
    ("program", "service_target"): (str, None, None, "unmet, tier or both"),
    ("program", "tier_days_share"): (float, 0.0, 1.0, "share of days"),
    ("catalogue", "max_kit_types_shs"): (int, 1, 50, "kit types"),
    ("catalogue", "max_kit_types_minigrid"): (int, 1, 50, "block types"),
    ("catalogue", "cost_per_kit_type_usd"): (float, 0.0, None, "USD"),
    ("catalogue", "spares_fraction"): (float, 0.0, 1.0, "fraction"),
    ("catalogue", "solver"): (str, None, None, "cbc or highs"),
    ("catalogue", "time_limit_s"): (float, 1.0, None, "s"),
    ("catalogue", "option_search"): (str, None, None, "bounded or every"),
    ("system", "voltages_v"): (list, None, None, "V"),
    ("system", "reconnect_hysteresis_soc"): (float, 0.0, 0.5, "state of charge"),
    ("system", "max_parallel_battery_strings"): (int, 1, 10, "strings"),
    ("system", "max_plant_lifepo4_blocks"): (int, 1, 64, "battery blocks"),
    ("system", "critical_shed_separation_soc"): (float, 0.0, 0.5, "state of charge"),
    ("system", "battery_temp_offset_k"): (float, -10.0, 30.0, "K"),
    ("system", "design_cell_temp_hot_c"): (float, 30.0, 100.0, "degC"),
    ("temperature", "default_mean_c"): (float, -30.0, 50.0, "degC"),
    ("temperature", "default_min_c"): (float, -50.0, 40.0, "degC"),
    ("temperature", "daily_amplitude_k"): (float, 0.0, 20.0, "K"),
    ("resource", "correction_factor"): (float, 0.3, 1.5, "multiplier on GHI"),
    ("resource", "persistence"): (float, 0.0, 0.95, "lag-1 autocorrelation"),
    ("resource", "max_distance_km"): (float, 0.0, 2000.0, "km"),
    ("pv", "soiling_fraction"): (float, 0.0, 0.5, "fraction"),
    ("pv", "wiring_fraction"): (float, 0.0, 0.5, "fraction"),
    ("pv", "other_losses_fraction"): (float, 0.0, 0.5, "fraction"),
    ("pv", "tilt_deg"): (float, 0.0, 90.0, "degrees"),
    ("pv", "azimuth_deg"): (float, 0.0, 360.0, "degrees from north"),
    ("pv", "albedo"): (float, 0.0, 1.0, "fraction"),
    ("demand", "household_day_to_day_sd"): (float, 0.0, 1.0, "relative"),
    ("demand", "common_day_to_day_sd"): (float, 0.0, 1.0, "relative"),
    ("demand", "minigrid_distribution_losses"): (float, 0.0, 0.5, "fraction"),
    ("demand", "growth_pct_per_year"): (list, None, None, "% per year, tiers 1-5"),
    ("demand", "community_growth_pct_per_year"): (float, -10.0, 30.0, "% per year"),
    ("demand", "school_closed_months"): (list, None, None, "months 1-12"),
    ("demand", "street_light_w"): (float, 0.0, 500.0, "W"),
    ("economics", "om_fraction_per_year"): (float, 0.0, 0.5, "of capex per year"),
    ("economics", "controller_life_years"): (float, 1.0, 50.0, "years"),
    ("economics", "inverter_life_years"): (float, 1.0, 50.0, "years"),
    ("economics", "array_life_years"): (float, 1.0, 100.0, "years"),
    ("transport", "depots_file"): (str, None, None, "path, relative to the program file"),
    ("transport", "road_factor"): (float, 1.0, 3.0, "road km per straight-line km"),
    ("transport", "shs_usd_per_kit_km"): (float, 0.0, None, "USD per kit per road km"),
    ("transport", "minigrid_usd_per_block_km"): (float, 0.0, None, "USD per plant block per road km"),
    ("transport", "handling_usd_per_kit"): (float, 0.0, None, "USD per kit or plant block"),
    ("transport", "battery_replacement_share"): (float, 0.0, 1.0, "share of a kit's delivery cost"),
}

ALLOWED_VOLTAGES_V = (12, 24, 48)
#: keys that may be absent (absent tilt/azimuth: tilt = |latitude|, at least 10 deg, facing the equator)
OPTIONAL_KEYS = {("pv", "tilt_deg"), ("pv", "azimuth_deg"), ("transport", "depots_file"),
                 ("system", "max_plant_lifepo4_blocks"), ("catalogue", "option_search")}
#: keys a program file does not inherit from the bundled demo program (they name demo files)
NOT_INHERITED = {("transport", "depots_file")}
NO_DEPOTS_NOTE = "no depots file (program [transport] depots_file): transport cost is zero."


def _numbers(v, lo, hi):
    return all(isinstance(x, (int, float)) and not isinstance(x, bool) and lo <= x <= hi for x in v)


#: list-valued keys: (check, what was expected)
LIST_RULES = {
    ("system", "voltages_v"): (lambda v: bool(v) and all(x in ALLOWED_VOLTAGES_V for x in v),
                               f"a non-empty list drawn from {list(ALLOWED_VOLTAGES_V)}"),
    ("demand", "growth_pct_per_year"): (lambda v: len(v) == 5 and _numbers(v, -10, 30),
                                        "five numbers (% per year for tiers 1-5) between -10 and 30"),
    ("demand", "school_closed_months"): (lambda v: all(isinstance(x, int) and 1 <= x <= 12 for x in v) and len(set(v)) == len(v),
                                         "distinct whole months 1-12"),
}


def default_config_path() -> Path:
    """Path of the bundled demo program configuration."""
    return Path(str(resources.files("fleet").joinpath("data", "demo_program.toml")))


@dataclass(frozen=True)
class ProgramConfig:
    """A validated program configuration: ``cfg["section"]["key"]`` access.

    ``depots`` is the program's depots table (:func:`fleet.transport.read_depots`,
    a GeoDataFrame) or None; ``depots_note`` says why there is none.
    """

    values: dict[str, dict[str, Any]]
    source: str
    depots: Any = field(default=None, compare=False, repr=False)
    depots_note: str = NO_DEPOTS_NOTE

    def __getitem__(self, section: str) -> dict[str, Any]:
        return self.values[section]

    def with_overrides(self, **sections: dict[str, Any]) -> "ProgramConfig":
        """A copy with some keys replaced, validated again (for the API and tests)."""
        merged = copy.deepcopy(self.values)
        for section, keys in sections.items():
            merged.setdefault(section, {}).update(keys)
        cfg = validate_config(merged, self.source)
        if _depots_file(cfg) == _depots_file(self):
            return replace(cfg, depots=self.depots, depots_note=self.depots_note)
        return _with_depots(cfg, Path(self.source).parent, bundled=self.source == str(default_config_path()))


def _read_toml(path: Path, label: str) -> dict[str, Any]:
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InputError([Problem(label, None, None, "file not found")]) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputError([Problem(label, None, None, f"not valid TOML: {exc}")]) from None


def validate_config(raw: dict[str, Any], label: str) -> ProgramConfig:
    """Check types and ranges of every key; collect every problem."""
    problems: list[Problem] = []
    out: dict[str, dict[str, Any]] = {}
    for section, keys in raw.items():
        if not isinstance(keys, dict):
            problems.append(Problem(label, None, section, "expected a [section] table"))
            continue
        for key, value in keys.items():
            spec = SCHEMA.get((section, key))
            name = f"{section}.{key}"
            if spec is None:
                problems.append(Problem(label, None, name, "unknown key"))
                continue
            kind, lo, hi, unit = spec
            if kind is float and isinstance(value, int) and not isinstance(value, bool):
                value = float(value)
            if kind is list:
                check, expected = LIST_RULES[(section, key)]
                if not (isinstance(value, list) and check(value)):
                    problems.append(Problem(label, None, name, f"expected {expected}, got {value!r}"))
                    continue
            elif not isinstance(value, kind) or isinstance(value, bool):
                problems.append(Problem(label, None, name, f"expected {kind.__name__}, got {value!r}"))
                continue
            elif kind in (int, float):
                if (lo is not None and value < lo) or (hi is not None and value > hi):
                    rng = f"{lo if lo is not None else '-inf'}..{hi if hi is not None else 'inf'}"
                    problems.append(Problem(label, None, name, f"{value} is outside {rng} {unit}".rstrip()))
                    continue
            out.setdefault(section, {})[key] = value
    kind = out.get("program", {}).get("service_target")
    if kind is not None and kind not in ("unmet", "tier", "both"):
        problems.append(Problem(label, None, "program.service_target", f"'{kind}' is not one of unmet, tier, both"))
    solver = out.get("catalogue", {}).get("solver")
    if solver is not None and solver not in ("cbc", "highs"):
        problems.append(Problem(label, None, "catalogue.solver", f"'{solver}' is not one of cbc, highs"))
    search = out.get("catalogue", {}).get("option_search")
    if search is not None and search not in ("bounded", "every"):
        problems.append(Problem(label, None, "catalogue.option_search", f"'{search}' is not one of bounded, every"))
    missing = [f"{s}.{k}" for (s, k) in SCHEMA if k not in out.get(s, {}) and (s, k) not in OPTIONAL_KEYS]
    if missing and not problems:
        problems.append(Problem(label, None, None, "missing keys: " + ", ".join(missing)))
    if problems:
        raise InputError(problems)
    return ProgramConfig(out, label)


def _depots_file(cfg: ProgramConfig) -> str:
    return str(cfg.values.get("transport", {}).get("depots_file", "")).strip()


def depots_path(cfg: ProgramConfig) -> Path | None:
    """The depots file a program read (None when it has no depots table)."""
    name = _depots_file(cfg)
    if not name or cfg.depots is None:
        return None
    return Path(name) if Path(name).is_absolute() else Path(cfg.source).parent / name


def _with_depots(cfg: ProgramConfig, folder: Path, bundled: bool) -> ProgramConfig:
    """Read the depots table the program names (relative to ``folder``, the program
    file's); a missing file is an input problem, except for the bundled demo program,
    whose depots file may not be installed (then: no transport cost, stated)."""
    name = _depots_file(cfg)
    if not name:
        return replace(cfg, depots=None, depots_note=NO_DEPOTS_NOTE)
    path = Path(name) if Path(name).is_absolute() else folder / name
    if not path.is_file():
        if bundled:
            return replace(cfg, depots=None, depots_note=f"the bundled demo program's depots file {path} is "
                                                         "not installed: transport cost is zero.")
        raise InputError([Problem(cfg.source, None, "transport.depots_file",
                                  f"depots file not found: {path} (a relative path is taken from the "
                                  "program file's folder)")])
    from .transport import read_depots
    return replace(cfg, depots=read_depots(path), depots_note="")


def load_config(path: str | Path | None = None) -> ProgramConfig:
    """Read a program TOML file over the bundled defaults and validate it.

    Parameters
    ----------
    path : str or Path, optional
        A program file. Keys it leaves out take the bundled demo values.
        None gives the bundled demo program itself.
    """
    base = _read_toml(default_config_path(), "bundled demo_program.toml")
    if path is None:
        return _with_depots(validate_config(base, str(default_config_path())), default_config_path().parent,
                            bundled=True)
    label = str(path)
    user = _read_toml(Path(path), label)
    merged = copy.deepcopy(base)
    for section, key in NOT_INHERITED:
        merged.get(section, {}).pop(key, None)
    for section, keys in user.items():
        if isinstance(keys, dict) and isinstance(merged.get(section), dict):
            merged[section].update(keys)
        else:
            merged[section] = keys
    return _with_depots(validate_config(merged, label), Path(path).parent, bundled=False)
