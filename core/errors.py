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


class StepError(FloatingPointError):
    """A step would have made the simulation's state non-finite; it was rolled back, so the world
    is as it was before the step (the message names the bodies and the stage)."""


#: The largest magnitude accepted for a position, point, size, speed (m/s) or angular speed
#: (rad/s). float64's spacing at 1e9 is 1.2e-7 (``np.spacing(1e9)``), four orders below the 5 mm
#: overlap allowance, so positions there still resolve contacts; a squared speed (1e18) times any
#: finite mass below 1e290 kg stays finite. Values beyond it are mistakes in a game or a teaching
#: scene (speeds above light's, worlds wider than the Earth's orbit is long), and accepting them let
#: a later step overflow deep inside the collision code (velocity 1e200) or the rotor exponential
#: (angular velocity 1e30).
MAX_MAGNITUDE = 1e9

#: The smallest size (radius, half-extent, edge, circumradius) of a shape, m. A 6-D ball of 1e-6 m
#: has volume 5.2e-36 m^6 and plane moment of inertia ~1e-45 kg m^2 at 1000 kg/m^6, far from
#: float64's underflow (2.2e-308), so its mass and inverse inertia stay finite; subnormal sizes
#: made the volume underflow to 0 (a ZeroDivisionError in the mass properties).
MIN_SIZE = 1e-6


def _kind_of(value: Any) -> str:
    """What a refused value was, in words (for the messages)."""
    if isinstance(value, (bool, np.bool_)):
        return f"a bool {value!r}"
    if isinstance(value, (str, bytes)):
        return f"a string {value!r}"
    return type(value).__name__


def numeric_array(name: str, value: Any, expected: str = "an array of numbers") -> NDArray[np.float64]:
    """Return ``value`` (numbers, a sequence or an array of them, any shape) as a float64 array.

    Refuses, with :class:`InputTypeError` naming ``name``: bools and bool arrays, strings (also
    numeric ones such as ``"1"``), objects that are not numbers, and ragged nested sequences.
    """
    if isinstance(value, (str, bytes, bool, np.bool_)):
        raise InputTypeError(f"{name}: expected {expected}, got {_kind_of(value)}")
    try:
        raw = value if isinstance(value, np.ndarray) else np.asarray(value)
    except (TypeError, ValueError) as exc:  # ragged nesting
        raise InputTypeError(f"{name}: expected {expected}, got a ragged or mixed sequence "
                             f"({type(value).__name__})") from exc
    kind = raw.dtype.kind
    if kind == "b":
        raise InputTypeError(f"{name}: expected {expected}, got an array of bools")
    if kind in "USV":
        raise InputTypeError(f"{name}: expected {expected}, got strings ({raw.dtype})")
    if kind == "c":
        raise InputTypeError(f"{name}: expected {expected}, got complex numbers")
    if kind == "O":
        # a list of numbers of mixed Python and numpy types: convert each, refuse the rest
        flat = raw.reshape(-1)
        for x in flat:
            if isinstance(x, (str, bytes, bool, np.bool_)) or not isinstance(x, (int, float, np.number)):
                raise InputTypeError(f"{name}: expected {expected}, got an element {_kind_of(x)}")
    try:
        return np.asarray(raw, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputTypeError(f"{name}: expected {expected}, got {type(value).__name__}") from exc


def as_float_array(
    name: str,
    value: Any,
    trailing: tuple[int, ...],
    *,
    finite: bool = True,
    exact: bool = False,
    bound: float | None = None,
) -> NDArray[np.float64]:
    """Return ``value`` as a float64 array whose last axes are ``trailing``.

    Leading (batch) axes are free unless ``exact``, when the shape must be ``trailing`` itself (a
    single vector: a ``(1, n)`` value is refused, not taken for a batch of one). Raises
    :class:`InputTypeError` naming ``name`` for values that are not numbers (see
    :func:`numeric_array`), :class:`InputError` when the shape differs, when ``finite`` is set
    and the array holds NaN or infinity, or when a magnitude exceeds ``bound``.
    """
    want = f"shape {trailing}" if exact else f"trailing shape {trailing}"
    arr = numeric_array(name, value, f"an array of numbers with {want}")
    nt = len(trailing)
    if exact and tuple(arr.shape) != tuple(trailing):
        raise InputError(f"{name}: expected shape {trailing}, got shape {arr.shape}")
    if arr.ndim < nt or tuple(arr.shape[arr.ndim - nt :]) != tuple(trailing):
        raise InputError(
            f"{name}: expected trailing shape {trailing} (components last), got shape {arr.shape}"
        )
    if finite and not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        where = tuple(int(i) for i in bad)
        raise InputError(f"{name}: expected finite values, got {arr[tuple(bad)]} at index {where}")
    if bound is not None and arr.size and np.max(np.abs(arr[np.isfinite(arr)]), initial=0.0) > bound:
        bad = np.argwhere(np.isfinite(arr) & (np.abs(arr) > bound))[0]
        where = tuple(int(i) for i in bad)
        raise InputError(f"{name}: expected magnitudes <= {bound:g}, got {arr[tuple(bad)]!r} at index "
                         f"{where}")
    return arr


def vector(name: str, value: Any, size: int, *, bound: float | None = MAX_MAGNITUDE) -> NDArray[np.float64]:
    """One finite vector of exactly ``size`` numbers, each of magnitude at most ``bound``."""
    return as_float_array(name, value, (size,), exact=True, bound=bound)


def positive_scalar(name: str, value: Any, *, allow_zero: bool = False,
                    maximum: float | None = None) -> float:
    """Return ``value`` as a positive finite float, or raise :class:`InputError` naming ``name``
    (:class:`InputTypeError` for a bool, a string or anything else that is not a number)."""
    if isinstance(value, (str, bytes, bool, np.bool_)) or (
            isinstance(value, np.ndarray) and value.dtype.kind not in "iuf"):
        raise InputTypeError(f"{name}: expected a number, got {_kind_of(value)}")
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise InputTypeError(f"{name}: expected a number, got {type(value).__name__} {value!r}") from exc
    ok = np.isfinite(v) and (v >= 0.0 if allow_zero else v > 0.0)
    if not ok:
        want = "a finite number >= 0" if allow_zero else "a finite number > 0"
        raise InputError(f"{name}: expected {want}, got {v!r}")
    if maximum is not None and v > maximum:
        raise InputError(f"{name}: expected a number <= {maximum:g}, got {v!r}")
    return v


def shape_size(name: str, value: Any) -> float:
    """A length that sizes a shape: a number in [MIN_SIZE, MAX_MAGNITUDE] m."""
    v = positive_scalar(name, value)
    if not MIN_SIZE <= v <= MAX_MAGNITUDE:
        raise InputError(f"{name}: expected a size in [{MIN_SIZE:g}, {MAX_MAGNITUDE:g}] m, got {v!r}")
    return v


def dimension(name: str, value: Any, *, minimum: int = 2) -> int:
    """Return ``value`` as an integer dimension >= ``minimum``, or raise :class:`InputError`."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        raise InputTypeError(f"{name}: expected an integer dimension >= {minimum}, got {value!r}")
    if int(value) < minimum:
        raise InputError(f"{name}: expected an integer dimension >= {minimum}, got {int(value)}")
    return int(value)
