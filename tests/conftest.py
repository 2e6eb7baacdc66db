"""Shared paths and fixtures of the test suite."""

from __future__ import annotations

from pathlib import Path

import pytest

#: The repository root (the tests run from a checkout).
ROOT = Path(__file__).resolve().parents[1]

#: The bundled demo cell config and night (an invented scenario, see sample_runs/README.md).
SAMPLE_CONFIG = ROOT / "configs" / "cell_b3.toml"
SAMPLE_RUN = ROOT / "sample_runs" / "cell_b3_2026-03-14.csv.gz"


@pytest.fixture(scope="session")
def sample_config() -> Path:
    """Path of the bundled Cell B3 config."""
    return SAMPLE_CONFIG


@pytest.fixture(scope="session")
def sample_run() -> Path:
    """Path of the bundled Cell B3 night."""
    return SAMPLE_RUN


def minimal_raw_config() -> dict:
    """The smallest config a run accepts, as parsed TOML: time, the two flows, CO2 and O2
    in columns t, f, a, c, o."""
    return {
        "fuel": {"preset": "diesel_2"},
        "channels": {
            "time": {"column": "t", "unit": "s"},
            "fuel_mass_flow": {"column": "f", "unit": "kg/h"},
            "air_mass_flow": {"column": "a", "unit": "kg/h", "basis": "wet"},
            "co2": {"column": "c", "unit": "%", "basis": "dry"},
            "o2": {"column": "o", "unit": "%", "basis": "dry"},
        },
    }
