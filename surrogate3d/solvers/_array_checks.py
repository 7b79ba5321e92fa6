"""Array arguments as float64 arrays of one shape, with messages naming the argument; their ranges are
checked by :mod:`surrogate3d.core.validation`."""

import numpy as np

from ..errors import ParameterError


def as_float_array(name, value):
    """``value`` as a float64 array; raise ParameterError if it is not numeric."""
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number or an array of numbers; got {value!r}") from None


def broadcast_to_shape(name, values, shape, what):
    """Broadcast ``values`` to ``shape`` or raise ParameterError naming ``name`` and ``what``."""
    try:
        return np.broadcast_to(values, shape)
    except ValueError:
        raise ParameterError(f"{name} has shape {values.shape}, which does not broadcast to {what} "
                             f"{shape}") from None
