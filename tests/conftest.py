"""Shared fixtures. Matplotlib draws off-screen; sampled fits are cached per session."""

import os

os.environ.setdefault("MPLBACKEND", "Agg")

from pathlib import Path

import pytest

from bayes_rr.describe import demo_path

REPO = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="session")
def demo_csv() -> Path:
    return demo_path()
