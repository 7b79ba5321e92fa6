"""Vectorized evaluation of flattened regression-tree ensembles (numpy only).

Each tree is a binary decision tree over the features: an internal node sends a column
to its ``left`` child when ``x[feature] <= threshold`` (or, for a missing value, NaN,
when ``missing_go_left``) and to its ``right`` child otherwise; a leaf holds a value.
The prediction of a target is its baseline plus the leaf values of its trees, added in
tree order, which is the gradient-boosting prediction (Friedman 2001) and the order in
which scikit-learn adds them, so the sums agree to the last bit.

Columns are evaluated all at once, one tree depth level per step: at every level each
(tree, column) pair moves one node down with array indexing.  Two tricks keep a step
to a few array operations:

* Thresholds are replaced by their rank among the sorted thresholds of the same
  feature, and every feature value by its rank (``searchsorted``), computed once per
  column: ``x <= threshold`` is then ``rank(x) <= rank(threshold)`` on small integers.
* Missing values get rank -1 in one copy of the rank table and a rank above every
  threshold in another; a node reads the copy that sends NaN its way, so NaN needs no
  test of its own.

Trees are sorted by depth so that deeper levels only touch the trees that still have
nodes there.

References
----------
Friedman, J. H., 2001: Greedy function approximation: a gradient boosting machine.
Annals of Statistics, 29, 1189-1232.
"""

import numpy as np

#: (tree, column) pairs handled per block; sized so the working arrays stay in cache.
_BLOCK_ELEMENTS = 1 << 17


class TreeEnsemble:
    """A flattened tree ensemble prepared for fast evaluation.

    Parameters
    ----------
    n_feature : int
    baseline : ndarray (n_target,)
        Prediction before any tree.
    tree_target, tree_offset, feature, threshold_index, threshold_values, left, right, missing_go_left, leaf_value : ndarray
        The ``boosted`` arrays of a checked coefficient document
        (``docs/export-format.md``): node arrays of all trees concatenated, children
        indexed within their tree, ``feature == -1`` at leaves, and the leaf values in
        node order.

    Examples
    --------
    One stump on feature 0 with threshold 0.5 (left leaf 1.0, right leaf 2.0), baseline 0:

    >>> import numpy as np
    >>> i = lambda *v: np.array(v)
    >>> trees = TreeEnsemble(1, i(0.0), i(0), i(0, 3), i(0, -1, -1), i(0, -1, -1), i(0.5),
    ...                      i(1, -1, -1), i(2, -1, -1), i(1, 0, 0), i(1.0, 2.0))
    >>> trees.predict(np.array([[0.2], [0.5], [0.7], [np.nan]]))[:, 0].tolist()
    [1.0, 1.0, 2.0, 1.0]
    """

    def __init__(self, n_feature, baseline, tree_target, tree_offset, feature, threshold_index, threshold_values,
                 left, right, missing_go_left, leaf_value):
        offset = np.asarray(tree_offset, dtype=np.int64)
        feature = np.asarray(feature, dtype=np.int64)
        n_tree, n_node = offset.size - 1, feature.size
        leaf = feature < 0
        tree_of_node = np.repeat(np.arange(n_tree), np.diff(offset))
        node = np.arange(n_node)
        threshold = np.zeros(n_node)
        threshold[~leaf] = np.asarray(threshold_values, dtype=np.float64)[np.asarray(threshold_index)[~leaf]]

        # Sorted distinct thresholds of each feature and each node's rank among them.
        self.n_feature = int(n_feature)
        self.cuts = [np.unique(threshold[~leaf & (feature == f)]) for f in range(self.n_feature)]
        self.used = [f for f in range(self.n_feature) if self.cuts[f].size]
        rank = np.full(n_node, -2, dtype=np.int64)          # -2 < every column rank: leaves never go left
        for f in self.used:
            at = ~leaf & (feature == f)
            rank[at] = np.searchsorted(self.cuts[f], threshold[at])
        top = max([c.size for c in self.cuts] + [1]) + 1     # rank of NaN in the "missing goes right" copy
        self.rank_dtype = np.int16 if top < np.iinfo(np.int16).max else np.int32
        self.nan_rank = top
        self.rank = rank.astype(self.rank_dtype)
        missing = np.asarray(missing_go_left, dtype=np.int64)
        self.row = np.where(leaf, 0, feature + self.n_feature * missing)

        # Global child indices; a leaf points to itself, so finished paths stand still.
        start = offset[tree_of_node]
        self.left = np.where(leaf, node, start + np.asarray(left, dtype=np.int64)).astype(np.int32)
        self.right = np.where(leaf, node, start + np.asarray(right, dtype=np.int64)).astype(np.int32)
        self.value = np.zeros(n_node)
        self.value[leaf] = np.asarray(leaf_value, dtype=np.float64)

        depth = _node_depths(offset, self.left, self.right, leaf)
        tree_depth = np.maximum.reduceat(depth, offset[:-1])
        self.order = np.argsort(-tree_depth, kind="stable")    # deepest trees first
        self.roots = offset[:-1][self.order].astype(np.int32)
        sorted_depth = tree_depth[self.order]
        self.active = [int(np.count_nonzero(sorted_depth > d)) for d in range(int(sorted_depth.max()))]
        position = np.empty(n_tree, dtype=np.int64)
        position[self.order] = np.arange(n_tree)
        target = np.asarray(tree_target, dtype=np.int64)
        self.baseline = np.asarray(baseline, dtype=np.float64)
        # Rows of each target's trees in the evaluation order, listed in the file's tree order.
        self.rows_of_target = [position[target == m] for m in range(self.baseline.size)]
        self.block = int(np.clip(_BLOCK_ELEMENTS // n_tree, 16, 8192))
        self._key = None

    @property
    def n_tree(self):
        return self.roots.size

    @property
    def max_depth(self):
        """Levels of the deepest tree."""
        return len(self.active)

    def _ranks(self, X, block):
        """Rank table (2 n_feature, block): rows f and n_feature + f hold feature f with NaN high and low."""
        ranks = np.zeros((2 * self.n_feature, block), dtype=self.rank_dtype)
        n = X.shape[0]
        for f in self.used:
            x = X[:, f]
            r = np.searchsorted(self.cuts[f], x, side="left")
            nan = np.isnan(x)
            ranks[f, :n] = np.where(nan, self.nan_rank, r)
            ranks[self.n_feature + f, :n] = np.where(nan, -1, r)
        return ranks

    def predict(self, X):
        """Predictions (n, n_target) for features X (n, n_feature); NaN marks a missing value."""
        X = np.asarray(X, dtype=np.float64)
        n = X.shape[0]
        out = np.empty((n, self.baseline.size))
        block = self.block
        if self._key is None:
            self._key = (self.row * block).astype(np.int32)   # offset of a node's row in the flat rank table
        key, rank, left, right = self._key, self.rank, self.left, self.right
        column = np.arange(block, dtype=np.int32)
        start_nodes = np.repeat(self.roots[:, None], block, axis=1)
        for start in range(0, n, block):
            part = X[start:start + block]
            flat = self._ranks(part, block).ravel()
            nodes = start_nodes.copy()
            for active in self.active:
                current = nodes[:active]
                go_left = flat[key[current] + column] <= rank[current]
                nodes[:active] = np.where(go_left, left[current], right[current])
            leaf_values = self.value[nodes]
            m = part.shape[0]
            for t, rows in enumerate(self.rows_of_target):
                total = np.full(block, self.baseline[t])
                for row in leaf_values[rows]:
                    total += row
                out[start:start + m, t] = total[:m]
        return out


def _node_depths(offset, left, right, leaf):
    """Depth of every node (roots 0), level by level from the roots."""
    depth = np.zeros(left.size, dtype=np.int64)
    level = offset[:-1]
    d = 0
    while level.size:
        depth[level] = d
        inner = level[~leaf[level]]
        level = np.concatenate([left[inner], right[inner]]).astype(np.int64)
        d += 1
    return depth
