"""Range checks of scene parameters, raising errors that name the parameter, its range and the value."""

import math

from ..errors import ParameterError


def check_number(label, name, value, low, high, low_open=False, high_open=False):
    """The value as a float, or ParameterError ``"{label}{name} must be in [low, high]; got value"``.

    ``low_open``/``high_open`` exclude the end points (shown as ``(`` and ``)``).
    """
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{label}{name} must be a number; got {value!r}") from None
    ok = math.isfinite(v) and (v > low if low_open else v >= low) and (v < high if high_open else v <= high)
    if not ok:
        lo, hi = ("(" if low_open else "["), (")" if high_open else "]")
        raise ParameterError(f"{label}{name} must be in {lo}{low:g}, {high:g}{hi}; got {value!r}")
    return v
