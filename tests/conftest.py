"""Shared test configuration.

``slow`` cases run by default in a reduced size (so CI exercises every module inside
its time budget); ``pytest --full`` runs them at the size their docstring states.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest


def pytest_addoption(parser):
    parser.addoption("--full", action="store_true", default=False,
                     help="run slow cases at full size")


@pytest.fixture(scope="session")
def full(request) -> bool:
    """True when the slow cases should run at full size (``pytest --full``)."""
    return bool(request.config.getoption("--full")) or os.environ.get("SHAPEDESC_FULL") == "1"


@pytest.fixture(scope="session")
def template_dir() -> Path:
    """Folder of the MNI ICBM152 2009a templates shipped in the nilearn wheel.

    Open template (Fonov et al., NeuroImage 2011, doi:10.1016/j.neuroimage.2010.07.033);
    nilearn is a test dependency, so this is always present in the test environment.
    """
    import nilearn

    d = Path(nilearn.__file__).parent / "datasets" / "data"
    assert (d / "mni_icbm152_wm_tal_nlin_sym_09a_converted.nii.gz").exists()
    return d


def _best_rotation(a, b):
    """Proper rotation R (det +1) with a @ R.T ≈ b, both (n, 3) (Kabsch 1976,
    doi:10.1107/S0567739476001873)."""
    u, _, vt = np.linalg.svd(b.T @ a)
    return u @ np.diag([1.0, 1.0, np.sign(np.linalg.det(u @ vt))]) @ vt


@pytest.fixture(scope="session")
def best_rotation():
    """:func:`_best_rotation`, for the tests that compare sphere maps up to a rotation."""
    return _best_rotation
