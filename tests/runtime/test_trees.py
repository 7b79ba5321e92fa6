"""The vectorized tree evaluator on hand-built trees with known answers.

Reference: the definition of a binary regression tree (Breiman et al. 1984,
Classification and Regression Trees, ch. 8) and of a boosted ensemble as the baseline
plus the sum of its trees (Friedman 2001); ``x <= threshold`` goes left and NaN follows
the node's missing-value direction (scikit-learn's convention, common practice).
"""

import numpy as np
import pytest

from surrogate3d.runtime.trees import TreeEnsemble


def _ensemble(n_feature, baseline, trees):
    """TreeEnsemble from per-tree lists of (feature, threshold, left, right, missing_left, value)."""
    thresholds = sorted({node[1] for _, nodes in trees for node in nodes if node[0] >= 0})
    arrays = {k: [] for k in ("feature", "threshold_index", "left", "right", "missing_go_left", "leaf_value")}
    offset, target = [0], []
    for m, nodes in trees:
        target.append(m)
        offset.append(offset[-1] + len(nodes))
        for f, t, left, right, missing, value in nodes:
            arrays["feature"].append(f)
            arrays["threshold_index"].append(thresholds.index(t) if f >= 0 else -1)
            arrays["left"].append(left)
            arrays["right"].append(right)
            arrays["missing_go_left"].append(missing)
            if f < 0:
                arrays["leaf_value"].append(value)
    return TreeEnsemble(n_feature, np.asarray(baseline, dtype=float), np.asarray(target), np.asarray(offset),
                        threshold_values=np.asarray(thresholds, dtype=float),
                        **{k: np.asarray(v) for k, v in arrays.items()})


LEAF = -1, 0.0, -1, -1, 0


def _leaf(value):
    return (*LEAF[:5], value)


def test_stump_ties_nan_and_infinities():
    stump = [(0, 0.5, 1, 2, 1, 0.0), _leaf(1.0), _leaf(2.0)]
    model = _ensemble(1, [10.0], [(0, stump)])
    x = np.array([[0.2], [0.5], [np.nextafter(0.5, 1.0)], [np.nan], [np.inf], [-np.inf]])
    np.testing.assert_array_equal(model.predict(x)[:, 0], [11.0, 11.0, 12.0, 11.0, 12.0, 11.0])


def test_deep_and_shallow_trees_of_two_targets():
    # Tree A (target 0), depth 3: x0 <= 0 ? (x1 <= 1 ? (x0 <= -1 ? 1 : 2) : 3) : 4; NaN goes right everywhere.
    deep = [(0, 0.0, 1, 6, 0, 0.0), (1, 1.0, 2, 5, 0, 0.0), (0, -1.0, 3, 4, 0, 0.0),
            _leaf(1.0), _leaf(2.0), _leaf(3.0), _leaf(4.0)]
    lone = [_leaf(0.25)]                                        # a tree that is just a leaf
    stump = [(1, 1.0, 1, 2, 1, 0.0), _leaf(-1.0), _leaf(-2.0)]  # target 1; NaN goes left
    model = _ensemble(2, [0.0, 100.0], [(0, lone), (1, stump), (0, deep)])
    X = np.array([[-2.0, 0.0], [-0.5, 0.0], [-0.5, 2.0], [3.0, 0.0], [np.nan, np.nan], [-2.0, np.nan]])
    expected = np.array([[1.25, 99.0], [2.25, 99.0], [3.25, 98.0], [4.25, 99.0], [4.25, 99.0], [3.25, 99.0]])
    np.testing.assert_array_equal(model.predict(X), expected)
    assert model.max_depth == 3 and model.n_tree == 3


def test_many_columns_span_several_blocks():
    stump = [(0, 0.0, 1, 2, 0, 0.0), _leaf(-1.0), _leaf(1.0)]
    model = _ensemble(1, [0.0], [(0, stump)] * 3)
    x = np.linspace(-1.0, 1.0, 3 * model.block + 7)[:, None]
    np.testing.assert_array_equal(model.predict(x)[:, 0], np.where(x[:, 0] <= 0.0, -3.0, 3.0))


def test_sum_follows_tree_order():
    # Floating-point addition is not associative; the runtime adds leaves in file order.
    values = [1e16, 1.0, -1e16]
    trees = [(0, [_leaf(v)]) for v in values]
    got = _ensemble(1, [0.0], trees).predict(np.zeros((1, 1)))[0, 0]
    assert got == ((0.0 + 1e16) + 1.0) - 1e16


def _random_tree(rng, n_leaves, n_feature, cuts):
    """Nodes (feature, threshold, left, right, missing_left, value) of a random tree, numbered breadth-first."""
    # Grow by splitting a random leaf until n_leaves; then number the nodes level by level,
    # so children are not next to their parent (unlike scikit-learn's depth-first order).
    children = {0: None}
    leaves = [0]
    next_id = 1
    while len(leaves) < n_leaves:
        split = leaves.pop(rng.integers(len(leaves)))
        children[split] = (next_id, next_id + 1)
        children[next_id] = children[next_id + 1] = None
        leaves += [next_id, next_id + 1]
        next_id += 2
    order, level = [], [0]
    while level:
        order += level
        level = [c for n in level if children[n] for c in children[n]]
    number = {n: i for i, n in enumerate(order)}
    nodes = []
    for n in order:
        if children[n] is None:
            nodes.append(_leaf(float(rng.normal())))
        else:
            left, right = children[n]
            nodes.append((int(rng.integers(n_feature)), float(rng.choice(cuts)), number[left], number[right],
                          int(rng.integers(2)), 0.0))
    return nodes


def _walk(nodes, x):
    """Reference: follow one tree from its root (Breiman et al. 1984; NaN follows missing_left)."""
    i = 0
    while nodes[i][0] >= 0:
        f, t, left, right, missing_left, _ = nodes[i]
        go_left = bool(missing_left) if np.isnan(x[f]) else x[f] <= t
        i = left if go_left else right
    return nodes[i][5]


@pytest.mark.parametrize("n_leaves", [5, 12, 31, 64, 150])
def test_random_trees_match_a_plain_walk(n_leaves):
    # Leaf words of 8, 16, 32 and 64 bits, and trees that span several 64-bit words.
    rng = np.random.default_rng(n_leaves)
    cuts = np.linspace(-1.0, 1.0, 9)
    trees = [(m, _random_tree(rng, int(rng.integers(2, n_leaves + 1)) if k else n_leaves, 3, cuts))
             for k in range(6) for m in (0, 1)]
    trees.append((1, [_leaf(0.5)]))
    model = _ensemble(3, [0.1, -0.2], trees)
    X = rng.choice(np.concatenate([cuts, [np.nan, -2.0, 2.0]]), size=(300, 3))
    X[:100] += rng.normal(scale=0.05, size=(100, 3))
    expected = np.zeros((X.shape[0], 2)) + [0.1, -0.2]
    for m, nodes in trees:
        expected[:, m] += [_walk(nodes, x) for x in X]
    np.testing.assert_array_equal(model.predict(X), expected)
