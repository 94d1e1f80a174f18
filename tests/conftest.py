"""Shared test fixtures.

Real data: the public Panasonic 18650PF dataset (Kollmeyer, Mendeley Data 2018,
doi:10.17632/wykht8y7tg.1, CC BY 4.0), found through SOCFUSE_REALDATA or ../shared/realdata.
"""
from __future__ import annotations

import os
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def realdata_root() -> Path | None:
    env = os.environ.get("SOCFUSE_REALDATA")
    root = Path(env) if env else REPO.parent / "shared" / "realdata"
    pan = root / "panasonic_18650pf"
    return pan if pan.is_dir() else None


@pytest.fixture(scope="session")
def realdata() -> Path:
    """Folder of the Panasonic 18650PF dataset, or skip the test."""
    root = realdata_root()
    if root is None:
        pytest.skip("real dataset not found: set SOCFUSE_REALDATA to the folder holding panasonic_18650pf/ "
                    "(Kollmeyer 2018, doi:10.17632/wykht8y7tg.1)")
    return root


@pytest.fixture(scope="session")
def repo() -> Path:
    return REPO
