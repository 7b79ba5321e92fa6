"""Learning curve: held-out skill against the number of training scenes.

The model is refitted, with its trained hyperparameters, on growing subsets of the
training scenes and scored on the held-out scenes.  Scenes are added in a seeded order
that alternates between regimes, so every subset mixes regimes as evenly as it can.
A curve still rising at the full set says more scenes would help.
"""

import numpy as np
import pandas as pd
from tqdm import tqdm

from ..learn.models import make_estimator
from ..learn.pairs_table import scene_table, select_scenes, target_matrix
from .metrics import error_metrics, watts_scale
from .predictions import model_correction
from .scored_model import ScoredModel


def scene_order(pairs, scenes, seed=0):
    """Training scenes in the order they are added: shuffled per regime, then interleaved."""
    table = scene_table(pairs)
    rng = np.random.default_rng(seed)
    queues = []
    for regime in sorted({table[s][0] for s in scenes}):
        members = sorted(s for s in scenes if table[s][0] == regime)
        queues.append([members[i] for i in rng.permutation(len(members))])
    order = []
    while any(queues):
        for queue in queues:
            if queue:
                order.append(queue.pop(0))
    return order


def subset_sizes(n_scenes, points):
    """Up to ``points`` increasing subset sizes ending at ``n_scenes``."""
    sizes = np.round(np.linspace(n_scenes / points, n_scenes, points)).astype(int)
    return sorted(set(int(s) for s in np.clip(sizes, 1, n_scenes)))


def learning_curve(kind, params, pairs, training_scenes, evaluation, features, targets, points=4, seed=0,
                   consistency=True, quiet=False):
    """Skill on ``evaluation`` of a model refitted on growing subsets of the training scenes.

    Parameters
    ----------
    kind : str
        Model kind (``"boosted"`` or ``"ridge"``).
    params : dict
        Hyperparameters.
    pairs : xarray.Dataset
        Table holding the training scenes.
    training_scenes : sequence of str
    evaluation : xarray.Dataset
        Held-out samples.
    features, targets : sequence of str
    points : int
        Number of subset sizes.
    seed : int
        Order in which scenes are added.
    consistency : bool
        Score corrections after the consistency step, as in the metric tables.
    quiet : bool

    Returns
    -------
    pandas.DataFrame
        Columns n_training_scenes, n_training_samples, target (``"mean"`` for the target
        average), skill (of the W m-2 errors).
    """
    order = scene_order(pairs, training_scenes, seed)
    true = target_matrix(evaluation, targets)
    flux = watts_scale(evaluation)
    rows = []
    for size in tqdm(subset_sizes(len(order), points), desc="learning curve", unit="fit",
                     disable=True if quiet else None, leave=False):
        subset = select_scenes(pairs, order[:size])
        model = make_estimator(kind, params).fit_pairs(subset, features, targets)
        correction, _ = model_correction(ScoredModel.from_estimator(kind, kind, model), evaluation, targets,
                                         consistency)
        skills = [error_metrics(correction[:, m], true[:, m], scale=flux)["skill"] for m in range(len(targets))]
        for target, skill in zip(list(targets) + ["mean"], skills + [float(np.nanmean(skills))]):
            rows.append({"n_training_scenes": size, "n_training_samples": int(subset.sizes["sample"]),
                         "target": target, "skill": skill})
    return pd.DataFrame(rows)
