"""Average linkage and optimal leaf ordering for the heat view's label order.

References beside each check: SciPy's ``scipy.cluster.hierarchy.linkage(method="average")`` for
the merges; the definition of optimal leaf ordering (Bar-Joseph, Gifford & Jaakkola 2001,
"Fast optimal leaf ordering for hierarchical clustering": the order allowed by the tree with the
smallest sum of distances between neighbours), checked by trying all 2^(n-1) orders. SciPy's own
``optimal_ordering=True`` is not used as the reference: it does not always return the best order
(SciPy issue #11227, open), and on random matrices it misses in about a third of the cases.
"""

from __future__ import annotations

import numpy as np
import pytest

from lintext.report.leaf_order import average_linkage, optimal_leaf_order


def random_distances(seed: int, n: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = rng.random((n, n))
    d = (x + x.T) / 2
    np.fill_diagonal(d, 0.0)
    return d


def path_length(dist, order) -> float:
    order = np.asarray(order)
    return float(dist[order[:-1], order[1:]].sum())


def tree_orders(merges, n):
    """Every leaf order the tree allows (the children of each merge either way round)."""
    def orders(node):
        if node < n:
            return [[node]]
        a, b = merges[node - n]
        return [x + y for x in orders(a) for y in orders(b)] + [y + x for x in orders(a) for y in orders(b)]
    return orders(2 * n - 2)


@pytest.mark.parametrize("seed", range(12))
def test_merges_equal_scipys_average_linkage(seed):
    from scipy.cluster.hierarchy import linkage
    from scipy.spatial.distance import squareform

    n = 5 + 4 * seed  # 5 to 49 labels
    d = random_distances(seed, n)
    reference = linkage(squareform(d, checks=False), method="average")
    assert average_linkage(d) == [(int(a), int(b)) for a, b in reference[:, :2]]


@pytest.mark.parametrize("seed", range(40))
def test_order_is_the_best_the_tree_allows(seed):
    n = 3 + seed % 7  # 3 to 9 leaves: at most 256 orders to try
    d = random_distances(100 + seed, n)
    merges = average_linkage(d)
    order = optimal_leaf_order(merges, d)
    allowed = tree_orders(merges, n)
    assert order.tolist() in allowed
    assert path_length(d, order) == pytest.approx(min(path_length(d, o) for o in allowed), rel=1e-12, abs=0)


def test_worked_example_of_scipy_issue_11227():
    # the matrix of SciPy issue #11227: with complete linkage the tree is ((1, 2), 0), 3) and the
    # best order 0, 1, 2, 3 (0.467 + 0.286 + 0.747 = 1.500); average linkage gives the same tree here
    d = np.array([[0.0, 0.46680166, 0.7747411, 0.79942054],
                  [0.46680166, 0.0, 0.28626558, 0.68441929],
                  [0.7747411, 0.28626558, 0.0, 0.74692541],
                  [0.79942054, 0.68441929, 0.74692541, 0.0]])
    merges = average_linkage(d)
    assert merges == [(1, 2), (0, 4), (3, 5)]
    order = optimal_leaf_order(merges, d).tolist()
    assert order in ([0, 1, 2, 3], [3, 2, 1, 0])
    assert path_length(d, order) == pytest.approx(0.46680166 + 0.28626558 + 0.74692541)


def test_one_and_two_leaves():
    assert optimal_leaf_order([], np.zeros((1, 1))).tolist() == [0]
    d = np.array([[0.0, 1.0], [1.0, 0.0]])
    assert average_linkage(d) == [(0, 1)]
    assert optimal_leaf_order([(0, 1)], d).tolist() == [0, 1]
