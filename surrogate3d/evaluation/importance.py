"""Permutation feature importance on held-out scenes, grouped by scene.

The importance of a feature is how much the skill drops when its values are shuffled
among the samples of each scene (never across scenes), averaged over repeats and then
over scenes; the spread over scenes gives its standard error.  Shuffling within a scene
keeps each scene's distribution of the feature and asks what the model takes from its
variation inside a scene; a feature constant within every scene gets zero importance.
"""

import numpy as np
import pandas as pd

from ..learn.cv import correction_skill
from ..learn.pairs_table import scene_labels, target_matrix
from .metrics import watts_scale


def _scene_skill(predicted, true, flux, members):
    return np.array([np.nanmean(correction_skill(predicted[idx], true[idx], None if flux is None else flux[idx]))
                     for idx in members])


def permutation_importance(model, pairs, targets, n_repeats=3, seed=0):
    """Drop in target-averaged skill (of the W m-2 errors) when each feature is permuted within each scene.

    Parameters
    ----------
    model : surrogate3d.evaluation.scored_model.ScoredModel
        An estimator or an exported file; predictions are scored as predicted (no
        consistency step).
    pairs : xarray.Dataset
        Held-out samples.
    targets : sequence of str
        Targets scored, in the model's target order.
    n_repeats : int
        Permutations per feature.
    seed : int

    Returns
    -------
    pandas.DataFrame
        Columns feature, importance (mean over scenes), importance_se (standard error over
        scenes), n_scenes; sorted by importance, largest first.

    References
    ----------
    Breiman, L., 2001: Random forests. Machine Learning, 45, 5-32 (permutation importance).

    Fisher, A., C. Rudin and F. Dominici, 2019: All models are wrong, but many are
    useful: learning a variable's importance by studying an entire class of prediction
    models simultaneously. Journal of Machine Learning Research, 20(177), 1-81.
    """
    names = list(model.feature_names)
    X = model.features(pairs)
    true = target_matrix(pairs, targets)
    flux = watts_scale(pairs)
    order = [model.target_names.index(t) for t in targets]
    scenes = scene_labels(pairs)
    members = [np.flatnonzero(scenes == s) for s in np.unique(scenes)]
    base = _scene_skill(model.predict(X)[:, order], true, flux, members)
    rng = np.random.default_rng(seed)
    rows = []
    for j, name in enumerate(names):
        drop = np.zeros(len(members))
        for _ in range(n_repeats):
            shuffled = X.copy()
            for idx in members:
                shuffled[idx, j] = X[rng.permutation(idx), j]
            drop += base - _scene_skill(model.predict(shuffled)[:, order], true, flux, members)
        drop /= n_repeats
        se = float(np.std(drop, ddof=1) / np.sqrt(drop.size)) if drop.size > 1 else float("nan")
        rows.append({"feature": name, "importance": float(np.mean(drop)), "importance_se": se,
                     "n_scenes": len(members)})
    return pd.DataFrame(rows).sort_values("importance", ascending=False, kind="stable").reset_index(drop=True)
