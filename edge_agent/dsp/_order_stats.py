"""Order statistics shared by the DSP modules (private)."""

from __future__ import annotations

from typing import Any

import numpy as np
import numpy.typing as npt

__all__ = ["median"]

FloatArray = npt.NDArray[np.floating[Any]]


def median(a: FloatArray) -> float:
    """``numpy.median`` of a non-empty 1-D array, the same value from one selection.

    ``numpy.median`` partitions at both middle ranks and at the last one (its NaN check), which
    takes numpy's general multi-rank path. One selection at rank n // 2 (numpy's vectorised
    quickselect) puts the upper middle value in place with everything below it to its left, so
    the lower middle value is the maximum of that left part. NaN anywhere gives NaN, as there.
    """
    n = a.size
    k = n // 2
    b = np.partition(a, k)
    upper = b[k]
    if np.isnan(b[k:].max()):
        return float("nan")
    if n % 2:
        return float(upper)
    lower = b[:k].max()
    return float((lower + upper) / 2.0)
