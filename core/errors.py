"""Errors raised by ndrigid and the small validators that raise them.

Every check names the argument, shows what it got (a shape or a value) and says what was expected,
so that a user reading a traceback can fix the call without opening the source. Validators run
*before* any state is touched: a call that fails leaves the simulation exactly as it was.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray


class InputError(ValueError):
    """A value passed to ndrigid has the wrong shape, kind or range."""


class InputTypeError(TypeError):
    """A value passed to ndrigid has the wrong Python type."""


def as_float_array(
    name: str,
    value: Any,
    trailing: tuple[int, ...],
    *,
    finite: bool = True,
) -> NDArray[np.float64]:
    """Return ``value`` as a float64 array whose last axes are ``trailing``.

    Leading (batch) axes are free. Raises :class:`InputError` naming ``name`` when the trailing
    shape differs, or when ``finite`` is set and the array holds NaN or infinity.
    """
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputTypeError(
            f"{name}: expected an array of numbers with trailing shape {trailing}, got {type(value).__name__}"
        ) from exc
    nt = len(trailing)
    if arr.ndim < nt or tuple(arr.shape[arr.ndim - nt :]) != tuple(trailing):
        raise InputError(
            f"{name}: expected trailing shape {trailing} (components last), got shape {arr.shape}"
        )
    if finite and not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        where = tuple(int(i) for i in bad)
        raise InputError(f"{name}: expected finite values, got {arr[tuple(bad)]} at index {where}")
    return arr


def positive_scalar(name: str, value: Any, *, allow_zero: bool = False) -> float:
    """Return ``value`` as a positive finite float, or raise :class:`InputError` naming ``name``."""
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputTypeError(f"{name}: expected a number, got {type(value).__name__} {value!r}") from exc
    ok = np.isfinite(v) and (v >= 0.0 if allow_zero else v > 0.0)
    if not ok:
        want = "a finite number >= 0" if allow_zero else "a finite number > 0"
        raise InputError(f"{name}: expected {want}, got {v!r}")
    return v


def dimension(name: str, value: Any, *, minimum: int = 2) -> int:
    """Return ``value`` as an integer dimension >= ``minimum``, or raise :class:`InputError`."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise InputTypeError(f"{name}: expected an integer dimension >= {minimum}, got {value!r}")
    if int(value) < minimum:
        raise InputError(f"{name}: expected an integer dimension >= {minimum}, got {int(value)}")
    return int(value)
