"""Shared fixtures: small programs that run in seconds."""

from __future__ import annotations

import numpy as np
import pytest

from fleet.components import read_library
from fleet.config import load_config
from fleet.iv import tables_for_kits
from fleet.kits import DesignConditions, candidate_kits, kernel_parameters


@pytest.fixture(scope="session")
def library():
    return read_library()


@pytest.fixture(scope="session")
def config():
    return load_config().with_overrides(program={"weather_years": 2})


@pytest.fixture(scope="session")
def kits(library):
    return candidate_kits(library, voltages_v=[12, 24, 48], max_parallel_strings=3,
                          cond=DesignConditions(cold_ambient_c=5.0, hot_cell_c=65.0))


@pytest.fixture(scope="session")
def tables(kits, library):
    return tables_for_kits(kits[0], library)


@pytest.fixture(scope="session")
def params(kits, tables):
    return kernel_parameters(kits[0], tables, reconnect_hysteresis_soc=0.15, pv_losses_fraction=0.14)
