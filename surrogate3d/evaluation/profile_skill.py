"""Skill of the heating-rate (profile) correction on held-out scenes.

The profile model's per-layer absorption corrections are made to sum to a column model's
absorption correction (:func:`surrogate3d.learn.profile_model.match_column_integral`), as
a host model would use them, and scored in the cloudy host columns (total cloud
fraction above 0), pooled over their layers, against no correction (the independent
column): RMSE of the layer absorption (fraction of the incident flux and W m-2) and of the
heating rate (K day-1, where the scenes give pressures), overall and by height relative to
the column's cloud top.
"""

from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..learn.profile_model import layer_fields
from ..runtime.profile import match_column_integral
from ..pairs.layer_features import layer_features, layer_sum
from .predictions import NO_CORRECTION
from ..solvers.heating import DRY_AIR_SPECIFIC_HEAT, SECONDS_PER_DAY, STANDARD_GRAVITY

#: Edges [m] of the bins of height above the cloud top (layer middle minus cloud-top height).
HEIGHT_BINS = (-np.inf, -1500.0, -1000.0, -500.0, -250.0, 0.0, 250.0, 500.0, 1000.0, np.inf)


@dataclass
class ProfileEvaluation:
    """What the report shows of the profile model.

    Attributes
    ----------
    model : str
        The profile model's name.
    column_model : str or None
        The column model whose absorption correction the profiles are matched to.
    table : pandas.DataFrame
        ``quantity, units, predictor, rmse, rmse_reduction, n``: pooled over the layers of
        the cloudy columns.
    by_height : pandas.DataFrame
        ``quantity, height_above_cloud_top, n, rmse_no_correction, rmse_model, rmse_reduction``.
    column_integral : dict
        Shares of the column absorption's RMSE removed in the cloudy columns by the
        profile's own sum (``rmse_reduction``) and by the column correction it is matched
        to (``rmse_reduction_matched``; ``..._all_columns_w_m2``: in every column, errors
        in W m-2, the report's headline skill), and ``largest_mismatch``: the largest
        ``|sum(profile) - column correction|`` after matching.
    mean_profiles : list of dict
        Domain-mean profiles of sample scenes: ``scene``, ``solar_zenith_angle``, ``height``
        and ``thickness`` [m] of the layers, and the absorbed flux of every layer [W m-2]
        in 3D (``full_3d``), in the independent column and corrected by the model
        (``independent_column`` plus the predicted change, ``corrected``).
    """

    model: str
    column_model: str | None
    table: pd.DataFrame
    by_height: pd.DataFrame
    column_integral: dict
    mean_profiles: list


def masked_rmse(values, mask):
    """Root-mean-square of ``values`` where ``mask`` holds.

    Parameters
    ----------
    values : ndarray
    mask : ndarray of bool
        Of the shape of ``values``.

    Returns
    -------
    float
        NaN where ``mask`` holds nowhere.
    """
    return float(np.sqrt(np.mean(values[mask] ** 2))) if mask.any() else float("nan")


def rmse_reduction(error, truth, mask):
    """Share of the RMSE of no correction that a correction removes, where ``mask`` holds.

    ``1 - RMSE(error) / RMSE(truth)``, the error of no correction being the 3D change
    ``truth`` itself.

    Parameters
    ----------
    error, truth : ndarray
        Corrected minus 3D, and 3D minus independent column, in the same units.
    mask : ndarray of bool
        Of the shape of ``error``.

    Returns
    -------
    float
        NaN where the RMSE of ``truth`` is 0 or ``mask`` holds nowhere.
    """
    base = masked_rmse(truth, mask)
    return 1.0 - masked_rmse(error, mask) / base if base > 0 else float("nan")


def height_rows(quantity, units, truth, guess, mask, height):
    """The rows of :attr:`ProfileEvaluation.by_height` of one quantity: the RMSE of no
    correction and of the model in every bin of :data:`HEIGHT_BINS`.

    Parameters
    ----------
    quantity, units : str
    truth, guess : ndarray (n_sample, n_layer)
        The 3D change of every layer and the model's, in ``units``.
    mask : ndarray of bool (n_sample, n_layer)
        The layers scored.
    height : ndarray (n_sample, n_layer)
        Height of every layer above its column's cloud top [m].

    Returns
    -------
    list of dict
    """
    rows = []
    for lo, hi in zip(HEIGHT_BINS[:-1], HEIGHT_BINS[1:]):
        inside = mask & (height >= lo) & (height < hi)
        rows.append({"quantity": quantity, "units": units, "height_above_cloud_top": f"[{lo:g}, {hi:g}) m",
                     "n": int(inside.sum()), "rmse_no_correction": masked_rmse(truth, inside),
                     "rmse_model": masked_rmse(guess - truth, inside),
                     "rmse_reduction": rmse_reduction(guess - truth, truth, inside)})
    return rows


def column_integral(own_sum, column, column_target, clouds, matched, scale=1.0):
    """:attr:`ProfileEvaluation.column_integral`: how much of the column target's RMSE the
    profile's own sum and the column correction it is matched to remove, and how closely
    the matched layers sum to that correction.

    Parameters
    ----------
    own_sum, column, column_target : ndarray (n_sample,)
        The profile's own column sum, the column correction its layers are matched to, and
        the 3D change of the column target.
    clouds : ndarray of bool (n_sample,)
        The cloudy columns.
    matched : ndarray (n_sample, n_layer)
        The matched layer corrections.
    scale : float or ndarray (n_sample,)
        Turns the column values into W m-2 for ``rmse_reduction_matched_all_columns_w_m2``
        (the incident flux [W m-2] for fractions of it).

    Returns
    -------
    dict
    """
    return {"rmse_reduction": rmse_reduction(own_sum - column_target, column_target, clouds),
            "rmse_reduction_matched": rmse_reduction(column - column_target, column_target, clouds),
            "rmse_reduction_matched_all_columns_w_m2": rmse_reduction((column - column_target) * scale,
                                                                      column_target * scale,
                                                                      np.ones(column.size, dtype=bool)),
            "largest_mismatch": float(np.max(np.abs(layer_sum(matched) - column)))}


def score_profiles(name, estimator, pairs, column_correction=None, column_model=None, sample_scenes=3, layers=None):
    """Score a profile model on a pair table (normally the held-out scenes).

    Parameters
    ----------
    name : str
    estimator : surrogate3d.learn.profile_model.ProfileCorrection
    pairs : xarray.Dataset
        With per-layer variables.
    column_correction : array_like (n_sample,), optional
        The column absorption correction to match; default the profile's own sum.
    column_model : str, optional
        Name of the column model whose consistency step gave ``column_correction``.
    sample_scenes : int
        Scenes (those of the largest domain-mean 3D change) whose domain-mean profiles
        are kept for a figure.
    layers : ndarray (n_sample, n_layer), optional
        The profile model's layer corrections of ``pairs``, if already predicted.

    Returns
    -------
    ProfileEvaluation
    """
    fields = layer_fields(pairs)
    raw = estimator.predict_pairs(pairs) if layers is None else layers
    own_sum = layer_sum(raw)
    column = own_sum if column_correction is None else np.asarray(column_correction, dtype=np.float64)
    predicted = match_column_integral(raw, column, fields["independent_column_absorption"])
    target = pairs["layer_absorption_target"].values
    incident = pairs["incident_flux"].values[:, None]
    cloudy = (pairs["cloud_fraction"].values > 0.0)[:, None] & np.isfinite(target)
    heating = pairs["layer_heating_rate_target"].values
    # Heating rate of an absorbed fraction [K day-1]: g / c_p * S0 cos(theta0) / dp (Liou 2002).
    per_fraction = (STANDARD_GRAVITY / DRY_AIR_SPECIFIC_HEAT * SECONDS_PER_DAY * incident
                    / pairs["host_layer_pressure_thickness"].values)
    quantities = [("layer absorption", "1", target, predicted, cloudy),
                  ("layer absorption", "W m-2", target * incident, predicted * incident, cloudy),
                  ("heating rate", "K day-1", heating, predicted * per_fraction, cloudy & np.isfinite(heating))]
    rows, by_height = [], []
    local = layer_features(fields["bottom"], fields["top"], fields["optical_depth"], fields["cloud_fraction"],
                           fields["independent_column_absorption"], fields["cos_solar_zenith"],
                           fields["slant_optical_depth_above"])
    height = local[..., 0]
    for quantity, units, truth, guess, mask in quantities:
        if not mask.any():
            continue
        for predictor, values in ((NO_CORRECTION, np.zeros_like(truth)), (name, guess)):
            rows.append({"quantity": quantity, "units": units, "predictor": predictor,
                         "rmse": masked_rmse(values - truth, mask),
                         "rmse_reduction": rmse_reduction(values - truth, truth, mask), "n": int(mask.sum())})
        by_height += height_rows(quantity, units, truth, guess, mask, height)
    column_target = pairs["target_value"].sel(target="atmosphere_absorption").values
    integral = column_integral(own_sum, column, column_target, cloudy.any(axis=1), predicted,
                               pairs["incident_flux"].values)
    return ProfileEvaluation(model=name, column_model=column_model, table=pd.DataFrame(rows),
                             by_height=pd.DataFrame(by_height), column_integral=integral,
                             mean_profiles=_mean_profiles(pairs, predicted, sample_scenes))


def _mean_profiles(pairs, predicted, count):
    """Domain-mean profiles (W m-2 per layer) of the ``count`` scenes (at one sun each) whose
    domain-mean 3D change of the layer absorption is largest."""
    incident = pairs["incident_flux"].values[:, None]
    change = pairs["layer_absorption_target"].values * incident
    keys = pd.DataFrame({"scene": pairs["scene"].values, "zenith": pairs["solar_zenith_angle"].values})
    size = {}
    for (scene, zenith), rows in keys.groupby(["scene", "zenith"], sort=True).groups.items():
        size[(scene, zenith)] = float(np.sqrt(np.nanmean(np.nanmean(change[np.asarray(rows)], axis=0) ** 2)))
    chosen, seen = [], set()
    for (scene, zenith), _ in sorted(size.items(), key=lambda item: -item[1]):
        if scene not in seen:
            chosen.append((scene, zenith))
            seen.add(scene)
        if len(chosen) == count:
            break
    out = []
    for scene, zenith in chosen:
        pick = ((keys["scene"] == scene) & (keys["zenith"] == zenith)).values
        bottom = pairs["host_layer_bottom"].values[pick][0]
        top = pairs["host_layer_top"].values[pick][0]
        ica = np.mean(pairs["independent_column_layer_absorption"].values[pick] * incident[pick], axis=0)
        out.append({"scene": str(scene), "solar_zenith_angle": float(zenith), "height": 0.5 * (bottom + top),
                    "thickness": top - bottom, "independent_column": ica,
                    "full_3d": np.mean(pairs["full_3d_layer_absorption"].values[pick] * incident[pick], axis=0),
                    "corrected": ica + np.mean(predicted[pick] * incident[pick], axis=0)})
    return out
