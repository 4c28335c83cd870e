"""Fixtures only; the builders of meshes, gauge maps and studies are in ``builders.py``."""

from __future__ import annotations

import os

import numpy as np
import pytest

os.environ.setdefault("MESA_SHADER_CACHE_DISABLE", "true")


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261201)
