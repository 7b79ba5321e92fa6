"""Error and skill metrics of a correction, with the Monte Carlo noise floor.

A correction ``p`` of a target with true value ``t`` (3D minus independent column) gives
the corrected flux ``ica + p``, whose error against the 3D benchmark is ``p - t``.  With
``n`` samples, ``e = p - t`` and the Monte Carlo standard error ``s`` of ``t``:

* ``RMSE = sqrt(mean(e^2))``, ``MAE = mean(|e|)``, ``bias = mean(e)``;
* ``R2 = 1 - sum(e^2) / sum((t - mean(t))^2)`` (coefficient of determination of the
  correction itself);
* ``skill = 1 - RMSE / RMSE_ica`` with ``RMSE_ica = sqrt(mean(t^2))``, the RMSE of no
  correction: 1 is perfect, 0 no better than the independent column, < 0 worse;
  undefined (NaN, "-" in the tables) where the benchmarks do not resolve a 3D effect,
  ``mean(t^2) <= 2 mean(s^2)`` (:data:`UNRESOLVED`);
* noise floor: even a perfect model (``p`` = noise-free truth) scores
  ``RMSE = sqrt(mean(s^2))`` against noisy targets, so the best reachable skill is
  ``noise_floor_skill = 1 - sqrt(mean(s^2)) / RMSE_ica``;
* noise-corrected RMSE: for a model whose errors are independent of the benchmark noise
  (true on held-out scenes), ``E[mean(e^2)] = MSE_true + mean(s^2)``, so
  ``noise_corrected_rmse = sqrt(max(mean(e^2) - mean(s^2), 0))`` estimates the RMSE
  against the noise-free 3D flux, and ``noise_corrected_skill = 1 -
  noise_corrected_rmse / sqrt(max(mean(t^2) - mean(s^2), 0))``.

W m-2 values multiply ``e``, ``t`` and ``s`` sample by sample by the incident flux on the
horizontal ``S0 cos(theta0)``.
"""

import numpy as np

#: Metric columns of :func:`error_metrics`, in table order.
METRICS = ("n", "rmse", "mae", "bias", "r2", "skill", "rmse_no_correction", "noise_rmse", "noise_floor_skill",
           "noise_corrected_rmse", "noise_corrected_skill")


#: Units of the headline skill: the skill of the errors in W m-2, each sample's error
#: weighted by its incident flux S0 cos(theta0), so that a column under a high sun, whose
#: flux errors matter most to the host's energy budget, counts for what it is in W m-2.
#: The report, ``summary.md``, the model card and the README all quote this skill; the
#: metric tables also hold the skill of the errors in fractions of the incident flux
#: (units ``"1"``), which weights every sun alike.
HEADLINE_UNITS = "W m-2"

#: A reference RMSE below this (normalized units or W m-2) means there is nothing to
#: correct (for example the direct beam under an overhead sun, where 3D equals the
#: independent column exactly); skill is then undefined.
NOTHING_TO_CORRECT = 1e-6

#: Skills are undefined where the benchmarks do not resolve a 3D effect: where
#: ``mean(t^2) <= UNRESOLVED * mean(s^2)``, the effect's noise-free RMS being no larger
#: than the benchmark noise (an atmosphere that hardly absorbs, clear sky).  There a
#: correction's tiny errors would give skills of any size and sign (common practice:
#: a signal-to-noise ratio of at least 1 before a relative score means anything).
UNRESOLVED = 2.0


def watts_scale(pairs):
    """Per-sample factor that turns a table's target units into W m-2.

    The incident flux on the horizontal S0 cos(theta0) [W m-2] of a shortwave table (targets
    in fractions of it); None for a longwave table, whose targets are in W m-2 already.
    """
    if "incident_flux" not in pairs:
        return None
    return np.asarray(pairs["incident_flux"].values, dtype=np.float64)


def _ratio(numerator, denominator):
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(numerator / denominator) if denominator > NOTHING_TO_CORRECT else float("nan")


def error_metrics(predicted, true, standard_error=None, scale=None):
    """Error, skill and noise metrics of one target's correction.

    Parameters
    ----------
    predicted : array_like (n,)
        Predicted correction [1, fraction of the incident flux].
    true : array_like (n,)
        Benchmark correction (3D minus independent column) [1].
    standard_error : array_like (n,), optional
        Monte Carlo standard error of ``true`` [1]; zero when omitted.
    scale : array_like (n,) or float, optional
        Factor applied sample by sample to errors, truths and standard errors, e.g. the
        incident flux [W m-2] to get W m-2 metrics.

    Returns
    -------
    dict
        Keys of :data:`METRICS` (see the module docstring for the formulas); units of
        ``true * scale`` for rmse, mae, bias, rmse_no_correction, noise_rmse and
        noise_corrected_rmse; skills and r2 are dimensionless.

    References
    ----------
    Wilks, D. S., 2011: Statistical Methods in the Atmospheric Sciences, 3rd ed.,
    Academic Press, ch. 8 (skill scores relative to a reference forecast; ``skill`` here
    is the RMSE-based form, the reference being no correction).

    Examples
    --------
    >>> m = error_metrics([0.1, 0.2], [0.1, 0.2])
    >>> m["skill"], m["rmse"]
    (1.0, 0.0)
    """
    p = np.asarray(predicted, dtype=np.float64).ravel()
    t = np.asarray(true, dtype=np.float64).ravel()
    s = np.zeros_like(t) if standard_error is None else np.asarray(standard_error, dtype=np.float64).ravel()
    factor = np.ones_like(t) if scale is None else np.broadcast_to(np.asarray(scale, dtype=np.float64), t.shape)
    e, t, s = (p - t) * factor, t * factor, s * factor
    n = t.size
    if n == 0:
        return {key: (0 if key == "n" else float("nan")) for key in METRICS}
    mse, mst, noise = float(np.mean(e**2)), float(np.mean(t**2)), float(np.mean(s**2))
    rmse, rmse_ica, noise_rmse = np.sqrt(mse), np.sqrt(mst), np.sqrt(noise)
    spread = float(np.sum((t - t.mean()) ** 2))
    corrected_rmse = np.sqrt(max(mse - noise, 0.0))
    # Denominators of the skills; 0 (skill undefined) where no 3D effect is resolved.
    resolved = not (noise > 0.0 and mst <= UNRESOLVED * noise)
    reference = rmse_ica if resolved else 0.0
    reference_noise_free = np.sqrt(max(mst - noise, 0.0)) if resolved else 0.0
    return {
        "n": int(n),
        "rmse": float(rmse),
        "mae": float(np.mean(np.abs(e))),
        "bias": float(np.mean(e)),
        "r2": 1.0 - _ratio(float(np.sum(e**2)), spread),
        "skill": 1.0 - _ratio(rmse, reference),
        "rmse_no_correction": float(rmse_ica),
        "noise_rmse": float(noise_rmse),
        "noise_floor_skill": 1.0 - _ratio(noise_rmse, reference),
        "noise_corrected_rmse": float(corrected_rmse),
        "noise_corrected_skill": 1.0 - _ratio(corrected_rmse, reference_noise_free),
    }
