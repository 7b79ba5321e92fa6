"""Checks of parameters and arrays, with one message for every failure.

A failed check raises the error class its caller names (:class:`~surrogate3d.errors.ParameterError`
unless told otherwise) with the message ``<name> must be <rule>; got <value>``, followed for an
array by `` (at index (i, j, ...); n values in all)``, the first offending element in C order.
Ranges are declared as intervals: ``low``/``high`` of None are unbounded, ``low_open``/``high_open``
exclude the end points.  This module imports only numpy and the standard library: the numpy-only
runtime uses it.

Examples
--------
>>> check_integer("photons", 2000, low=1)
2000
>>> check_number("roulette_weight", 0.0, 0.0, 1.0, low_open=True)
Traceback (most recent call last):
...
surrogate3d.errors.ParameterError: roulette_weight must be in (0, 1]; got 0.0
>>> check_array("g", np.array([0.1, 1.0, 1.0]), -1.0, 1.0, low_open=True, high_open=True)
Traceback (most recent call last):
...
surrogate3d.errors.ParameterError: g must be in (-1, 1); got 1.0 (at index 1; 2 values in all)
>>> first_nonfinite(np.array([[0.0, 1.0], [np.inf, np.nan]]))
((1, 0), 2)
"""

import math
import numbers

import numpy as np

from ..errors import ParameterError


def interval(low=None, high=None, low_open=False, high_open=False):
    """An interval as text: ``[0, 1]``, ``(0, inf)``; an unbounded end is open.

    Examples
    --------
    >>> interval(0.0, None, low_open=True)
    '(0, inf)'
    """
    left = "(" if low_open or low is None else "["
    right = ")" if high_open or high is None else "]"
    return f"{left}{_bound(low, '-inf')}, {_bound(high, 'inf')}{right}"


def _bound(value, unbounded):
    if value is None:
        return unbounded
    if isinstance(value, numbers.Integral):
        return str(int(value))
    return f"{value:g}"


def _show(value):
    # numpy scalars print as their Python value, so messages show plain numbers.
    return repr(value.item() if isinstance(value, np.generic) else value)


def message(name, rule, value, index=None, count=1):
    """The one message: ``<name> must be <rule>; got <value> (at index ...)``.

    Parameters
    ----------
    name : str
        The parameter or variable, as the caller knows it.
    rule : str
        What it must be: ``"in [0, 1]"``, ``"an integer >= 1"``, ``"finite"``.
    value
        The offending value (of an array: its first offending element).
    index : int, tuple of int or str, optional
        Where in an array the value is (an index of one dimension shown as a plain int); a str is
        shown as given (a sample and its scene).
    count : int
        How many elements break the rule.
    """
    text = f"{name} must be {rule}; got {_show(value)}"
    if index is not None:
        if isinstance(index, tuple) and len(index) == 1:
            index = index[0]
        where = index if isinstance(index, str) else f"index {index}"
        more = f"; {count} values in all" if count > 1 else ""
        text += f" (at {where}{more})"
    return text


def fail(name, rule, value, index=None, count=1, error=ParameterError):
    """Raise ``error`` (a :class:`~surrogate3d.errors.Surrogate3DError`) with :func:`message`."""
    raise error(message(name, rule, value, index, count))


def first_true(mask):
    """Index (tuple, C order) of the first True element of ``mask`` and the count of True ones, or None."""
    mask = np.asarray(mask)
    flat = np.flatnonzero(mask)
    if flat.size == 0:
        return None
    return tuple(int(i) for i in np.unravel_index(flat[0], mask.shape)), int(flat.size)


def first_nonfinite(values):
    """Index (tuple, C order) of the first NaN or infinite element of ``values`` and their count, or None."""
    return first_true(~np.isfinite(np.asarray(values, dtype=np.float64)))


def check_number(name, value, low=None, high=None, low_open=False, high_open=False, error=ParameterError):
    """``value`` as a float if it is a finite real number in the interval; raise ``error`` otherwise.

    Booleans and strings are not numbers here, though Python converts them.
    """
    if isinstance(value, (bool, np.bool_, str, bytes)):
        fail(name, "a number", value, error=error)
    try:
        number = float(value)
    except (TypeError, ValueError):
        fail(name, "a number", value, error=error)
    if not (math.isfinite(number) and _inside(number, low, high, low_open, high_open)):
        fail(name, _range_rule(low, high, low_open, high_open), value, error=error)
    return number


def check_integer(name, value, low=None, high=None, error=ParameterError):
    """``value`` as an int if it is an integer in ``[low, high]``; raise ``error`` otherwise.

    Whole floats are not integers here: a count given as 1e5 is a slip of the user's.
    """
    if low is not None and high is not None:
        rule = f"an integer in [{low}, {high}]"
    else:
        rule = "an integer" + (f" >= {low}" if low is not None else "") + (f" <= {high}" if high is not None else "")
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Integral) \
            or not _inside(int(value), low, high, False, False):
        fail(name, rule, value, error=error)
    return int(value)


def check_option(name, value, options, error=ParameterError):
    """``value`` if it is one of ``options`` (names, or the keys of a dict); raise ``error`` listing them otherwise."""
    try:
        known = value in options
    except TypeError:
        known = False
    if not known:
        fail(name, "one of " + ", ".join(str(o) for o in options), value, error=error)
    return value


def check_bool(name, value, error=ParameterError):
    """``value`` as a bool if it is True or False (numpy's included); raise ``error`` otherwise."""
    if not isinstance(value, (bool, np.bool_)):
        fail(name, "true or false", value, error=error)
    return bool(value)


def check_finite(name, values, error=ParameterError):
    """Raise ``error`` at the first NaN or infinite element of the array ``values``."""
    found = first_nonfinite(values)
    if found is not None:
        _fail_at(name, "finite", values, *found, error)


def check_array(name, values, low=None, high=None, low_open=False, high_open=False, error=ParameterError):
    """Raise ``error`` at the first element of the array ``values`` not finite or outside the interval.

    Non-finite elements are reported first (they are outside every interval).
    """
    check_finite(name, values, error)
    values = np.asarray(values, dtype=np.float64)
    outside = np.zeros(values.shape, dtype=bool)
    if low is not None:
        outside |= values <= low if low_open else values < low
    if high is not None:
        outside |= values >= high if high_open else values > high
    found = first_true(outside)
    if found is not None:
        _fail_at(name, _range_rule(low, high, low_open, high_open), values, *found, error)


def _fail_at(name, rule, values, index, count, error):
    values = np.asarray(values)
    fail(name, rule, values[index].item(), index if values.ndim else None, count, error)


def _inside(value, low, high, low_open, high_open):
    above = low is None or (value > low if low_open else value >= low)
    below = high is None or (value < high if high_open else value <= high)
    return above and below


def _range_rule(low, high, low_open, high_open):
    return "finite" if low is None and high is None else f"in {interval(low, high, low_open, high_open)}"
