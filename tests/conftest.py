"""Shared test set-up: the ``slow`` marker and the end-to-end tests' recording cache."""

from __future__ import annotations

import pytest


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line(
        "markers", "slow: end-to-end runs on simulated recordings (tens of seconds each); "
        "still run by default, deselect with -m 'not slow'")


@pytest.fixture(scope="session")
def e2e_cache(tmp_path_factory: pytest.TempPathFactory):
    """Simulated recordings and command runs, each made once per session (all workers)."""
    from tests.e2e_helpers import Cache, shared_root

    return Cache(shared_root(tmp_path_factory.getbasetemp()))
