"""Shared helper of the findings modules."""
import numpy as np


def _out(x):
    """0-d results as Python scalars, arrays unchanged."""
    x = np.asarray(x)
    return x.item() if x.ndim == 0 else x
