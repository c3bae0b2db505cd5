"""Array aliases and small result types shared by the geometry modules."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
Float32Array = NDArray[np.float32]
IntArray = NDArray[np.int64]
BoolArray = NDArray[np.bool_]

RngLike = int | np.random.Generator


def as_generator(rng: RngLike) -> np.random.Generator:
    """Return a Generator for a seed or pass a Generator through unchanged."""
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(rng)
