"""Values drawn per scene: a configuration value may be a range or a list to draw from.

In a scene-set configuration, ``{uniform = [low, high]}`` stands for a number drawn
uniformly between ``low`` and ``high``, and ``{choice = [a, b, ...]}`` for one of the
elements, each equally likely (an element may itself hold draws).  Anything else is
taken as it is, tables and arrays element by element.  Every scene draws with its own
seed: each top-level key from its own random stream of (seed, regime name, key), so
that adding or changing one key leaves the draws of the others alone, and the same
configuration gives the same scenes.
"""

import numbers
import zlib

from ..core.validation import check_number
from ..errors import ParameterError
from .random_fields import random_generator

#: The draw kinds, each a one-key table.
DRAW_KINDS = ("uniform", "choice")
_DRAW_STREAM = zlib.crc32(b"per-scene draws")


def is_draw(value):
    """True for a one-key table ``{uniform = ...}`` or ``{choice = ...}``."""
    return isinstance(value, dict) and len(value) == 1 and next(iter(value)) in DRAW_KINDS


def contains_draw(value):
    """True when a value holds a draw anywhere."""
    if is_draw(value):
        return True
    if isinstance(value, dict):
        return any(contains_draw(v) for v in value.values())
    if isinstance(value, (list, tuple)):
        return any(contains_draw(v) for v in value)
    return False


def _is_number(value):
    return isinstance(value, numbers.Real) and not isinstance(value, bool)


def _check_leaf(value, where, low, high):
    if low is not None and _is_number(value):
        check_number(where, value, low, high)


def check_draws(value, where, low=None, high=None):
    """Check the draws in a value up front, and that its numbers lie in ``[low, high]``.

    Parameters
    ----------
    value : object
        A configuration value, possibly holding draws.
    where : str
        Its name in messages, for example ``"scenes.toml: [optics] surface_albedo"``.
    low, high : float, optional
        Allowed range of every number in the value (the ends of a uniform range, the
        elements of a choice, the values of a table).

    Raises
    ------
    surrogate3d.errors.ParameterError
        A malformed draw or a number out of range, naming where.

    Examples
    --------
    >>> check_draws({"uniform": [0.03, 0.8]}, "surface_albedo", 0.0, 1.0)
    >>> check_draws({"uniform": [0.3, 0.1]}, "surface_albedo")
    Traceback (most recent call last):
    ...
    surrogate3d.errors.ParameterError: surface_albedo uniform needs low <= high; got [0.3, 0.1]
    """
    if is_draw(value):
        kind, arg = next(iter(value.items()))
        if kind == "uniform":
            if not (isinstance(arg, (list, tuple)) and len(arg) == 2 and all(_is_number(v) for v in arg)):
                raise ParameterError(f"{where} uniform must be two numbers [low, high]; got {arg!r}")
            if arg[0] > arg[1]:
                raise ParameterError(f"{where} uniform needs low <= high; got {arg!r}")
            for v in arg:
                _check_leaf(v, f"{where} uniform", low, high)
            return
        if not isinstance(arg, (list, tuple)) or not arg:
            raise ParameterError(f"{where} choice must be a non-empty array; got {arg!r}")
        for i, option in enumerate(arg):
            check_draws(option, f"{where} choice[{i}]", low, high)
        return
    if isinstance(value, dict):
        for key, item in value.items():
            if key in DRAW_KINDS:
                raise ParameterError(f"{where}: a {key} draw must be the only key of its table; got {value!r}")
            check_draws(item, f"{where}.{key}", low, high)
    elif isinstance(value, (list, tuple)):
        for i, item in enumerate(value):
            check_draws(item, f"{where}[{i}]", low, high)
    else:
        _check_leaf(value, where, low, high)


def resolve(value, rng):
    """The value with every draw replaced by a drawn value.

    Parameters
    ----------
    value : object
        A checked value (:func:`check_draws`).
    rng : numpy.random.Generator

    Returns
    -------
    object
        Numbers for uniform draws, the chosen (resolved) element for choices.

    Examples
    --------
    >>> resolve({"visible": {"choice": [0.1, 0.2]}, "near_infrared": 0.3}, random_generator(0))
    {'visible': 0.2, 'near_infrared': 0.3}
    """
    if is_draw(value):
        kind, arg = next(iter(value.items()))
        if kind == "uniform":
            return float(rng.uniform(arg[0], arg[1]))
        return resolve(arg[int(rng.integers(len(arg)))], rng)
    if isinstance(value, dict):
        return {key: resolve(item, rng) for key, item in value.items()}
    if isinstance(value, list):
        return [resolve(item, rng) for item in value]
    return value


def draw_stream(seed, regime_name, key):
    """The random stream of one configuration key for one scene.

    Parameters
    ----------
    seed : int
        The scene's seed.
    regime_name : str
        The regime's name (after any label).
    key : str
        The configuration key.

    Returns
    -------
    numpy.random.Generator
    """
    return random_generator(seed, _DRAW_STREAM, zlib.crc32(regime_name.encode("utf-8")),
                            zlib.crc32(key.encode("utf-8")))
