"""Shared input validation for the science modules.

Each helper takes the argument's *name* so that the error can say which argument was wrong,
its value, and what is valid. They accept scalars, sequences, numpy arrays and pandas Series,
and return the input as a float ndarray (callers restore the input's kind on output with
:func:`like_input`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from swimlab.errors import InputError, OutOfRangeError


def as_float_array(name: str, value: Any) -> np.ndarray:
    """Return ``value`` as a float ndarray, or raise naming ``name`` if it is not numeric."""
    if isinstance(value, pd.Series):
        value = value.to_numpy()
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name} must be numeric; got {value!r}") from exc
    return arr


def _first_bad(arr: np.ndarray, bad: np.ndarray) -> float:
    return float(np.asarray(arr)[bad].flat[0])


def finite(name: str, value: Any, unit: str = "") -> np.ndarray:
    """Require every element of ``value`` to be finite (not NaN, not infinite)."""
    arr = as_float_array(name, value)
    bad = ~np.isfinite(arr)
    if bad.any():
        raise InputError(f"{name} must be a finite number{_unit(unit)}; got {_first_bad(arr, bad)!r}")
    return arr


def positive(name: str, value: Any, unit: str = "") -> np.ndarray:
    """Require every element of ``value`` to be finite and strictly greater than zero."""
    arr = finite(name, value, unit)
    bad = arr <= 0
    if bad.any():
        raise InputError(f"{name} must be greater than zero{_unit(unit)}; got {_first_bad(arr, bad)!r}")
    return arr


def non_negative(name: str, value: Any, unit: str = "") -> np.ndarray:
    """Require every element of ``value`` to be finite and at least zero."""
    arr = finite(name, value, unit)
    bad = arr < 0
    if bad.any():
        raise InputError(f"{name} must be zero or more{_unit(unit)}; got {_first_bad(arr, bad)!r}")
    return arr


def in_range(name: str, value: Any, low: float, high: float, unit: str = "", what: str = "") -> np.ndarray:
    """Require every element of ``value`` to lie in ``[low, high]``.

    ``what`` names the range (e.g. ``"the IAPWS 2008 viscosity correlation"``) for the message.
    Raises :class:`~swimlab.errors.OutOfRangeError`.
    """
    arr = finite(name, value, unit)
    bad = (arr < low) | (arr > high)
    if bad.any():
        range_of = f" ({what})" if what else ""
        raise OutOfRangeError(
            f"{name} must lie between {low:g} and {high:g}{_unit(unit)}{range_of}; "
            f"got {_first_bad(arr, bad)!r}"
        )
    return arr


def choice(name: str, value: str, valid: dict | list | tuple | set) -> str:
    """Require ``value`` to be one of ``valid``; the message lists the valid choices."""
    if value not in valid:
        options = ", ".join(repr(v) for v in sorted(valid))
        raise ValueError(f"unknown {name} {value!r}; valid choices are {options}")
    return value


def like_input(result: np.ndarray, *inputs: Any) -> Any:
    """Return ``result`` in the kind of the first array-like input.

    A pandas Series input gives a Series with its index; all-scalar inputs give a float;
    otherwise an ndarray.
    """
    for item in inputs:
        if isinstance(item, pd.Series):
            return pd.Series(np.broadcast_to(result, item.shape), index=item.index)
    if np.ndim(result) == 0:
        return float(result)
    return result


def _unit(unit: str) -> str:
    return f" [{unit}]" if unit else ""
