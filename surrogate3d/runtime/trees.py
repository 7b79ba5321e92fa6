"""Vectorized evaluation of flattened regression-tree ensembles (numpy only).

Each tree is a binary decision tree over the features: an internal node sends a column
to its ``left`` child when ``x[feature] <= threshold`` (or, for a missing value, NaN,
when ``missing_go_left``) and to its ``right`` child otherwise; a leaf holds a value.
The prediction of a target is its baseline plus the leaf values of its trees, added in
tree order, which is the gradient-boosting prediction (Friedman 2001) and the order in
which scikit-learn adds them, so the sums agree to the last bit.

Rather than walking the trees node by node, the evaluator finds every tree's exit leaf
from the outcomes of all its node tests at once (Lucchese et al. 2015): number the
leaves of a tree from left to right; a node whose test sends the column right rules out
every leaf of its left subtree, a contiguous run of leaf numbers; the exit leaf is the
leftmost leaf that no node rules out.  With the leaves of a tree as the bits of a word
(8, 16, 32 or 64 bits, the smallest that holds the largest tree), a block of columns
costs a few whole-array operations whatever the depth of the trees:

1. evaluate the distinct (feature, threshold) tests of the ensemble on every column of
   the block (``x > threshold``, one broadcast comparison);
2. give every internal node the word of the leaves its test rules out, and OR the words
   of the nodes of each tree (the nodes of all trees are padded to the same count, so
   this is one reduction over an axis);
3. the exit leaf is the lowest zero bit of the result, ``~w & (w + 1)``, whose bit
   number is the exponent of its exact floating-point value;
4. gather the leaf values and add them per target in tree order.

The tests are the comparisons scikit-learn makes (``x <= threshold`` on the float64
values, NaN following the node's missing-value direction), so the exit leaves, and hence
the sums, are the same.  Trees of more than 64 leaves span several words; the exit leaf
is then the first leaf left in any of them.

References
----------
Friedman, J. H., 2001: Greedy function approximation: a gradient boosting machine.
Annals of Statistics, 29, 1189-1232.

Lucchese, C., F. M. Nardini, S. Orlando, R. Perego, N. Tonellotto and R. Venturini,
2015: QuickScorer: a fast algorithm to rank documents with additive ensembles of
regression trees.  Proceedings of the 38th ACM SIGIR Conference, 73-82.
"""

import numpy as np

from ..core.config import TREE_BLOCK_ELEMENTS

#: Unsigned word types by the number of leaves they hold.
_WORDS = ((8, np.uint8), (16, np.uint16), (32, np.uint32), (64, np.uint64))


def _tree_levels(offset, left, right, leaf):
    """Global node indices of each depth level, roots first (children are global indices)."""
    levels = []
    level = offset[:-1]
    while level.size:
        levels.append(level)
        inner = level[~leaf[level]]
        level = np.concatenate([left[inner], right[inner]])
    return levels


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
        indexed within their tree and after their parent, ``feature == -1`` at leaves,
        and the leaf values in node order.

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
        self.n_tree = offset.size - 1
        self.n_feature = int(n_feature)
        leaf = feature < 0
        tree_of_node = np.repeat(np.arange(self.n_tree), np.diff(offset))
        start = offset[tree_of_node]
        left = np.where(leaf, -1, start + np.asarray(left, dtype=np.int64))
        right = np.where(leaf, -1, start + np.asarray(right, dtype=np.int64))
        levels = _tree_levels(offset, left, right, leaf)
        self.max_depth = len(levels) - 1

        # Leaves below each node, and the left-to-right number of its first leaf.
        n_leaves = leaf.astype(np.int64)
        for level in reversed(levels):
            inner = level[~leaf[level]]
            n_leaves[inner] = n_leaves[left[inner]] + n_leaves[right[inner]]
        first = np.zeros(feature.size, dtype=np.int64)
        for level in levels:
            inner = level[~leaf[level]]
            first[left[inner]] = first[inner]
            first[right[inner]] = first[inner] + n_leaves[left[inner]]

        # Evaluation positions: the k-th trees of all targets side by side (one addition
        # per k serves every target).  A target with fewer trees gets leading one-leaf
        # trees of value 0, which change no sum: its running total starts as 0.0 + baseline
        # (never -0.0), as in scikit-learn, and adding 0.0 to it is exact.
        target = np.asarray(tree_target, dtype=np.int64)
        self.baseline = np.asarray(baseline, dtype=np.float64)
        self.start_value = 0.0 + self.baseline
        n_target = self.baseline.size
        counts = np.bincount(target, minlength=n_target)
        self.n_rounds = int(counts.max())
        by_target = np.argsort(target, kind="stable")
        rank = np.empty(self.n_tree, dtype=np.int64)
        rank[by_target] = np.arange(self.n_tree) - np.repeat(np.cumsum(counts) - counts, counts)
        position = (rank + self.n_rounds - counts[target]) * n_target + target
        n_position = self.n_rounds * n_target
        position_leaves = np.ones(n_position, dtype=np.int64)
        position_leaves[position] = n_leaves[offset[:-1]]
        leaf_start = np.concatenate([[0], np.cumsum(position_leaves)])
        self.leaf_values = np.zeros(int(leaf_start[-1]))
        leaf_nodes = np.flatnonzero(leaf)
        self.leaf_values[leaf_start[position[tree_of_node[leaf_nodes]]] + first[leaf_nodes]] = \
            np.asarray(leaf_value, dtype=np.float64)

        # Leaves as the bits of words; a segment is one word of one position.
        self.bits, self.word = next((b, w) for b, w in _WORDS if b >= position_leaves.max() or b == 64)
        words = (position_leaves + self.bits - 1) // self.bits
        self.multi_word = bool(words.max() > 1)
        segment_start = np.concatenate([[0], np.cumsum(words)])
        n_segment = int(segment_start[-1])
        segment_position = np.repeat(np.arange(n_position), words)
        segment_word = np.arange(n_segment) - segment_start[segment_position]
        self.segment_leaf = (leaf_start[segment_position] + self.bits * segment_word)[:, None]
        in_word = position_leaves[segment_position] - self.bits * segment_word
        self.segment_leaves = np.minimum(self.bits, in_word)[:, None]
        self.position_segments = segment_start[:-1]

        # One entry per (internal node, word it rules leaves out of): the node's test and
        # the bits of the leaves of its left subtree in that word; entries are padded to the
        # same count per segment with entries that rule out nothing.
        inner = np.flatnonzero(~leaf)
        low, high = first[inner], first[inner] + n_leaves[left[inner]]
        span = (high - 1) // self.bits - low // self.bits + 1
        node = np.repeat(inner, span)
        word = np.repeat(low // self.bits, span) + np.arange(span.sum()) - np.repeat(np.cumsum(span) - span, span)
        lo = np.maximum(np.repeat(low, span), word * self.bits) - word * self.bits
        hi = np.minimum(np.repeat(high, span), (word + 1) * self.bits) - word * self.bits
        ruled_out = np.array([((1 << h) - 1) ^ ((1 << l) - 1) for l, h in zip(lo.tolist(), hi.tolist())],
                             dtype=self.word)
        segment = segment_start[position[tree_of_node[node]]] + word
        per_segment = np.bincount(segment, minlength=n_segment)
        self.width = max(int(per_segment.max()), 1)
        by_segment = np.argsort(segment, kind="stable")
        slot = segment[by_segment] * self.width + np.arange(segment.size) \
            - np.repeat(np.cumsum(per_segment) - per_segment, per_segment)
        self.ruled_out = np.zeros(n_segment * self.width, dtype=self.word)
        self.ruled_out[slot] = ruled_out[by_segment]
        self.ruled_out = self.ruled_out[:, None]

        # The distinct (feature, threshold) tests, and the test of every entry (padding
        # entries take test 0: they rule out nothing whatever its outcome).
        thresholds = np.asarray(threshold_values, dtype=np.float64)
        self.features = np.unique(feature[inner]) if inner.size else np.zeros(1, dtype=np.int64)
        node_feature = np.searchsorted(self.features, feature[node[by_segment]])
        node_threshold = thresholds[np.asarray(threshold_index, dtype=np.int64)[node[by_segment]]]
        tests, test_of_entry = np.unique(np.stack([node_feature, node_threshold]), axis=1, return_inverse=True)
        if not tests.size:
            tests = np.array([[0.0], [np.inf]])          # x > inf never holds
        self.test_feature = tests[0].astype(np.int64)
        self.test_threshold = tests[1][:, None]
        self.entry_test = np.zeros(n_segment * self.width, dtype=np.int64)
        self.entry_test[slot] = test_of_entry.ravel()
        self.entry_feature = self.test_feature[self.entry_test]
        self.entry_nan_right = np.zeros((n_segment * self.width, 1), dtype=bool)
        self.entry_nan_right[slot, 0] = np.asarray(missing_go_left, dtype=np.int64)[node[by_segment]] == 0
        # Leaf number = exponent bits of the exit bit + (first leaf of the segment - bias).
        bias = 127 if self.bits <= 32 else 1023
        self.segment_leaf_biased = self.segment_leaf - bias
        self.block = int(np.clip(TREE_BLOCK_ELEMENTS // (n_segment * self.width), 128, 4096))

    def predict(self, X):
        """Predictions (n, n_target) for features X (n, n_feature); NaN marks a missing value."""
        X = np.asarray(X, dtype=np.float64)
        out = np.empty((X.shape[0], self.baseline.size))
        for start in range(0, X.shape[0], self.block):
            out[start:start + self.block] = self._predict_block(X[start:start + self.block])
        return out

    def _predict_block(self, X):
        n = X.shape[0]
        columns = np.ascontiguousarray(X[:, self.features].T)
        # "Goes right" is x > threshold ("x <= threshold" fails); NaN compares false, so it
        # goes left unless its node sends missing values right.
        goes_right = np.take(np.greater(np.take(columns, self.test_feature, axis=0), self.test_threshold),
                             self.entry_test, axis=0)
        nan = np.isnan(columns)
        if nan.any():
            goes_right |= np.take(nan, self.entry_feature, axis=0) & self.entry_nan_right
        if self.word is np.uint8:
            ruled_out = goes_right.view(np.uint8)
            ruled_out *= self.ruled_out
        else:
            ruled_out = goes_right * self.ruled_out
        left_over = np.bitwise_or.reduce(ruled_out.reshape(-1, self.width, n), axis=1)
        # The exit leaf is the lowest zero bit; its number is the exponent of the exact
        # floating-point value of that bit.
        exit_bit = ~left_over & (left_over + 1)
        if self.bits <= 32:
            exponent = exit_bit.astype(np.float32).view(np.int32) >> 23
        else:
            exponent = exit_bit.astype(np.float64).view(np.int64) >> 52
        if self.multi_word:
            # A word whose leaves are all ruled out has no zero bit among them.
            number = exponent + self.segment_leaf_biased
            number = np.where((exit_bit == 0) | (number - self.segment_leaf >= self.segment_leaves),
                              np.iinfo(np.int64).max, number)
            number = np.minimum.reduceat(number, self.position_segments, axis=0)
        else:
            number = exponent + self.segment_leaf_biased
        values = np.take(self.leaf_values, number).reshape(self.n_rounds, self.baseline.size, n)
        total = np.repeat(self.start_value[:, None], n, axis=1)
        for round_values in values:
            total += round_values
        return total.T
