"""Losses of a linear classifier on its scores, and the full training objective.

Scores of a batch are ``S = X @ W + b`` with ``W`` of shape ``(n_features, n_labels)``
(one row per feature, C order) and ``b`` of shape ``(n_labels,)``. Two losses:

``softmax``
    Multinomial cross-entropy ``log(sum_j exp(s_j)) - s_y``; its gradient with respect
    to the scores is ``softmax(s) - onehot(y)``. With two labels it is the binary
    logistic loss on the margin ``s_1 - s_0``.
``hinge``
    Multiclass hinge of Crammer and Singer (2001), ``max(0, 1 + max_{j != y} s_j - s_y)``.
    Where the loss is positive its (sub)gradient is ``+1`` at the competing label and
    ``-1`` at the true label; ties among competitors go to the lowest label index, and at
    the kink (loss exactly 0) the gradient is 0. With two labels it is the binary hinge on
    the margin ``s_1 - s_0``.

Every value is the mean over the examples of the batch. The bias is never regularised.
The compiled kernels (:mod:`lintext.engine.kernels`) implement the same per-example formulas
and are tested against this module.
"""

from __future__ import annotations

from .lazy import np

SOFTMAX = 0
HINGE = 1
LOSS_CODES = {"softmax": SOFTMAX, "hinge": HINGE}


def loss_code(loss: str | int) -> int:
    """Integer code of a loss given by name (``"softmax"``, ``"hinge"``) or code."""
    if isinstance(loss, str):
        try:
            return LOSS_CODES[loss]
        except KeyError:
            raise ValueError(f"unknown loss {loss!r}; expected one of {sorted(LOSS_CODES)}") from None
    if loss in (SOFTMAX, HINGE):
        return int(loss)
    raise ValueError(f"unknown loss code {loss!r}")


def example_losses_grads(loss: str | int, S: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-example losses and per-example gradients with respect to the scores.

    Parameters
    ----------
    loss : {"softmax", "hinge"} or int code
    S : ndarray of shape (n, n_labels)
        Scores.
    y : int ndarray of shape (n,)
        True label indices.

    Returns
    -------
    losses : ndarray of shape (n,)
    grads : ndarray of shape (n, n_labels)
        ``d loss_i / d S[i]`` (not divided by ``n``).
    """
    S = np.asarray(S, dtype=np.float64)
    y = np.asarray(y, dtype=np.int64)
    rows = np.arange(S.shape[0])
    code = loss_code(loss)
    if code == SOFTMAX:
        m = S.max(axis=1, keepdims=True)
        shifted = S - m
        log_z = np.log(np.exp(shifted).sum(axis=1, keepdims=True))
        losses = (m + log_z)[:, 0] - S[rows, y]
        grads = np.exp(shifted - log_z)
        grads[rows, y] -= 1.0
        return losses, grads
    # Crammer-Singer hinge; np.argmax keeps the first of tied maxima.
    others = S.copy()
    others[rows, y] = -np.inf
    rival = np.argmax(others, axis=1)
    margin = 1.0 + others[rows, rival] - S[rows, y]
    active = margin > 0.0
    losses = np.where(active, margin, 0.0)
    grads = np.zeros_like(S)
    grads[rows[active], rival[active]] = 1.0
    grads[rows[active], y[active]] = -1.0
    return losses, grads


def scores_loss_grad(loss: str | int, S: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    """Mean loss of a batch and its gradient with respect to the scores.

    Parameters
    ----------
    loss : {"softmax", "hinge"} or int code
    S : ndarray of shape (n, n_labels)
        Scores of the batch.
    y : int ndarray of shape (n,)
        True label indices.

    Returns
    -------
    mean_loss : float
        ``(1/n) * sum_i loss(S[i], y[i])``.
    dS : ndarray of shape (n, n_labels)
        ``d mean_loss / d S`` (per-example gradients divided by ``n``).
    """
    losses, grads = example_losses_grads(loss, S, y)
    n = max(S.shape[0], 1)
    return float(losses.sum() / n), grads / n


def mean_loss(loss: str | int, S: np.ndarray, y: np.ndarray) -> float:
    """Mean loss of scores ``S`` for labels ``y`` (no regularisation term)."""
    return scores_loss_grad(loss, S, y)[0]


def objective(loss: str | int, X, y: np.ndarray, W: np.ndarray, b: np.ndarray,
              l2: float) -> tuple[float, np.ndarray, np.ndarray]:
    """Regularised training objective ``mean loss + (l2/2) * ||W||^2`` and its gradient.

    Parameters
    ----------
    loss : {"softmax", "hinge"} or int code
    X : scipy.sparse CSR matrix of shape (n, n_features)
    y : int ndarray of shape (n,)
    W : ndarray of shape (n_features, n_labels)
    b : ndarray of shape (n_labels,)
        Bias, not regularised.
    l2 : float
        L2 strength (``>= 0``).

    Returns
    -------
    value : float
    grad_W : ndarray of shape (n_features, n_labels)
        ``X.T @ dS + l2 * W``.
    grad_b : ndarray of shape (n_labels,)
        ``dS.sum(axis=0)``.
    """
    W = np.asarray(W, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    S = np.asarray(X @ W) + b
    value, dS = scores_loss_grad(loss, S, y)
    value += 0.5 * l2 * float(np.sum(W * W))
    grad_W = np.asarray(X.T @ dS) + l2 * W
    grad_b = dS.sum(axis=0)
    return value, grad_W, grad_b
