"""Average-linkage clustering and the optimal order of its leaves, for the few dozen labels of
the heat view (NumPy, O(n^3); importing SciPy's clustering would cost more than running this).

- Average linkage (UPGMA): repeatedly merge the two closest clusters; the distance between
  clusters is the mean distance between their members.
- Optimal leaf ordering (Bar-Joseph, Gifford & Jaakkola 2001, "Fast optimal leaf ordering for
  hierarchical clustering"): among the 2^(n-1) orders the tree allows (flipping the children of
  any merge), the one whose neighbouring leaves have the smallest summed distance.
"""

from __future__ import annotations

import numpy as np


def average_linkage(dist: np.ndarray) -> list[tuple[int, int]]:
    """The merges of average-linkage clustering of a symmetric distance matrix, first to last.

    Clusters are numbered as SciPy's ``linkage`` numbers them: the leaves ``0..n-1``, then
    ``n + k`` for the cluster made by merge ``k``; each merge is ``(smaller id, larger id)``.
    Ties go to the first pair in row-major order of the current clusters.
    """
    n = len(dist)
    between = np.array(dist, dtype=np.float64)
    np.fill_diagonal(between, np.inf)
    size = np.ones(n)
    ident = list(range(n))  # the cluster held in row/column i
    merges = []
    for k in range(n - 1):
        i, j = divmod(int(np.argmin(between)), n)
        i, j = min(i, j), max(i, j)
        merges.append((min(ident[i], ident[j]), max(ident[i], ident[j])))
        joined = (size[i] * between[i] + size[j] * between[j]) / (size[i] + size[j])
        between[i, :] = joined
        between[:, i] = joined
        between[i, i] = np.inf
        between[j, :] = np.inf
        between[:, j] = np.inf
        size[i] += size[j]
        ident[i] = n + k
    return merges


def optimal_leaf_order(merges: list[tuple[int, int]], dist: np.ndarray) -> np.ndarray:
    """The leaves of the tree ``merges`` (from :func:`average_linkage`) in the order with the
    smallest sum of distances between neighbours (ties: the first minimum found)."""
    dist = np.asarray(dist, dtype=np.float64)
    n = len(dist)
    if n == 1:
        return np.zeros(1, dtype=np.int64)
    leaves: list[np.ndarray] = [np.array([i]) for i in range(n)]
    children: list[tuple[int, int] | None] = [None] * n
    # cost[i, j]: the smallest sum over the orders of the lowest common cluster of leaves i
    # and j (``meet[i, j]``) that start at i and end at j; an order of a cluster runs from a
    # leaf of one child to a leaf of the other, or is the single leaf itself
    cost = np.full((n, n), np.inf)
    np.fill_diagonal(cost, 0.0)
    meet = np.diag(np.arange(n))
    for a, b in merges:
        A, B = leaves[a], leaves[b]
        # the order of A ends at k, crosses to m in B (min over k), then runs through B to j (min over m)
        to_b = (_ends(a, A, cost, meet)[:, :, None] + dist[np.ix_(A, B)][None, :, :]).min(axis=1)
        through = (to_b[:, :, None] + _ends(b, B, cost, meet)[None, :, :]).min(axis=1)
        node = len(leaves)
        cost[np.ix_(A, B)] = through
        cost[np.ix_(B, A)] = through.T
        meet[np.ix_(A, B)] = node
        meet[np.ix_(B, A)] = node
        leaves.append(np.concatenate([A, B]))
        children.append((a, b))
    root = len(leaves) - 1
    a, b = children[root]
    block = cost[np.ix_(leaves[a], leaves[b])]
    i, j = np.unravel_index(int(np.argmin(block)), block.shape)
    return np.array(_walk(root, int(leaves[a][i]), int(leaves[b][j]), leaves, children, cost, meet, dist), dtype=np.int64)


def _walk(node, first, last, leaves, children, cost, meet, dist) -> list[int]:
    """The leaves of ``node`` in its cheapest order from leaf ``first`` to leaf ``last``."""
    if children[node] is None:
        return [first]
    a, b = children[node]
    if first not in leaves[a]:  # the order runs from the second child to the first
        a, b = b, a
    A, B = leaves[a], leaves[b]
    whole_a = np.where(meet[first, A] == a, cost[first, A], np.inf)
    whole_b = np.where(meet[B, last] == b, cost[B, last], np.inf)
    total = whole_a[:, None] + dist[np.ix_(A, B)] + whole_b[None, :]
    k, m = np.unravel_index(int(np.argmin(total)), total.shape)
    return (_walk(a, first, int(A[k]), leaves, children, cost, meet, dist)
            + _walk(b, int(B[m]), last, leaves, children, cost, meet, dist))


def _ends(cluster, members, cost, meet) -> np.ndarray:
    """``cost`` between the members of ``cluster``, infinite for pairs that do not span it."""
    return np.where(meet[np.ix_(members, members)] == cluster, cost[np.ix_(members, members)], np.inf)
