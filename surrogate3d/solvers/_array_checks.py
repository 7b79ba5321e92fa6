"""Up-front checks of array arguments, with messages naming the argument, index and value."""

import numpy as np

from ..errors import ParameterError


def as_float_array(name, value):
    """``value`` as a float64 array; raise ParameterError if it is not numeric."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number or an array of numbers; got {value!r}") from None


def _report(name, values, bad, rule):
    idx = tuple(int(i) for i in np.argwhere(bad)[0])
    value = float(values[idx])
    count = int(np.count_nonzero(bad))
    where = f" at index {idx}" if values.ndim else ""
    more = f" ({count} values in all)" if count > 1 else ""
    raise ParameterError(f"{name} {rule}{where}: {value!r}{more}")


def check_finite(name, values):
    """Raise ParameterError at the first NaN or infinite element of ``values``."""
    bad = ~np.isfinite(values)
    if bad.any():
        _report(name, values, bad, "is not finite")


def check_range(name, values, low, high, low_open=False, high_open=False):
    """Raise ParameterError at the first element of ``values`` outside the interval.

    NaN and infinite values are reported first. ``low`` or ``high`` may be None (unbounded).
    """
    check_finite(name, values)
    bad = np.zeros(values.shape, dtype=bool)
    if low is not None:
        bad |= (values <= low) if low_open else (values < low)
    if high is not None:
        bad |= (values >= high) if high_open else (values > high)
    if bad.any():
        left = "(" if low_open else "["
        right = ")" if high_open else "]"
        lo = "-inf" if low is None else f"{low:g}"
        hi = "inf" if high is None else f"{high:g}"
        _report(name, values, bad, f"is outside {left}{lo}, {hi}{right}")


def broadcast_to_shape(name, values, shape, what):
    """Broadcast ``values`` to ``shape`` or raise ParameterError naming ``name`` and ``what``."""
    try:
        return np.broadcast_to(values, shape)
    except ValueError:
        raise ParameterError(f"{name} has shape {values.shape}, which does not broadcast to {what} "
                             f"{shape}") from None
