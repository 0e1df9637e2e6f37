"""Optimizer rules in plain NumPy, the readable specification, and the one optimizer registry.

A *rule* owns per-coordinate state arrays named after the maths (``sum_sq_grad``,
``first_moment``, ``second_moment``, ``avg_sq_update``, ``update_count``) and has a pure
``update(grad, state, lr) -> (delta, new_state)``: it never mutates its inputs. The
compiled kernels (:mod:`lintext.engine.kernels`) implement exactly these rules and are tested
against this module on small problems; the integer codes below are what they receive.
:data:`OPTIMIZERS` declares every optimizer once (name, code, rule, hyperparameters and
their defaults, default learning rate, state arrays); everything else reads it.

L2 regularisation and sparse ("lazy") updates are defined here once for every rule:

* :func:`apply_step` -- one step on a block of coordinates. For SGD and AdaGrad
  (``rule.proximal``) L2 is a proximal step with the rule's own per-coordinate step size
  ``eta``: ``w <- (w - eta*g) / (1 + eta*l2)`` (composite mirror descent, Duchi, Shalev-Shwartz,
  Singer & Tewari 2010; Duchi, Hazan & Singer 2011). Its fixed point is
  ``grad loss + l2*w = 0``, the minimiser of ``loss + (l2/2)||w||^2``. For the rules with
  decaying state (RMSProp, AdaDelta, Adam) L2 is added to the gradient: ``g + l2*w``.
* :func:`catch_up` -- what ``k`` missed steps (steps in which a feature was absent, so its
  loss gradient was 0) do to its coordinates under lazy updates.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from .lazy import np

# Integer codes shared with the kernels (frozen; see OPTIMIZERS).
SGD = 0
ADAGRAD = 1
ADADELTA = 2
RMSPROP = 3
ADAM = 4
FTRL = 5

# --------------------------------------------------------------------------- rules


@dataclass(frozen=True)
class PlainSGD:
    """Plain stochastic gradient descent.

    Update rule: ``w <- w - eta_t * g`` (Robbins & Monro, 1951). No state.

    Caveats: a constant ``eta`` does not converge to the optimum of a noisy objective; use
    the ``inverse`` or ``inverse-sqrt`` schedules for that. With L2 the step is proximal
    (see :func:`apply_step`).
    """

    proximal = True

    def init_state(self, shape, dtype="float64") -> dict:
        return {}

    def update(self, grad, state, lr):
        return -lr * np.asarray(grad), dict(state)

    def effective_step(self, state, lr):
        return lr

    def skip(self, state, k):
        return dict(state)


@dataclass(frozen=True)
class AdaGrad:
    """AdaGrad, diagonal version (Duchi, Hazan & Singer, JMLR 2011).

    Update rule, per coordinate::

        sum_sq_grad <- sum_sq_grad + g^2          (starting at initial_sum_sq)
        w <- w - eta * g / (sqrt(sum_sq_grad) + epsilon)

    The accumulator includes the current gradient. Started at 0, the first step of a
    coordinate has size ~eta whatever its gradient, so a feature seen once gets a full step.
    ``initial_sum_sq = delta^2 > 0`` gives the denominator ``sqrt(delta^2 + G)``, the smooth
    form of the paper's ``delta*I + diag(G)^(1/2)`` (within a factor sqrt(2) of it, as
    ``(a + b)^2 <= 2(a^2 + b^2)``): a first step ``eta * g / sqrt(delta^2 + g^2)`` that scales
    with the gradient while ``|g| << delta``. ``epsilon`` (default 1e-10) is added *outside* the
    square root and only guards against division by zero; the paper's ``delta*I`` term is
    ``epsilon``. The default ``initial_sum_sq`` was measured (see the README).

    Caveats: the step size only shrinks, so late features learn with large steps and early,
    frequent ones with small steps; that is the point for sparse text, but a too-large
    ``eta`` is never forgotten. A zero gradient changes nothing, so lazy updates are exact.
    """

    epsilon: float = 1e-10
    initial_sum_sq: float = 0.01
    proximal = True

    def init_state(self, shape, dtype="float64") -> dict:
        return {"sum_sq_grad": np.full(shape, self.initial_sum_sq, dtype)}

    def update(self, grad, state, lr):
        sum_sq_grad = state["sum_sq_grad"] + np.square(grad)
        delta = -lr * grad / (np.sqrt(sum_sq_grad) + self.epsilon)
        return delta, {"sum_sq_grad": sum_sq_grad}

    def effective_step(self, state, lr):
        return lr / (np.sqrt(state["sum_sq_grad"]) + self.epsilon)

    def skip(self, state, k):
        return dict(state)


@dataclass(frozen=True)
class AdaDelta:
    """AdaDelta (Zeiler, arXiv:1212.5701, 2012, Algorithm 1), with an optional learning rate.

    Update rule, per coordinate, with ``RMS[x] = sqrt(E[x^2] + epsilon)``::

        second_moment <- rho * second_moment + (1 - rho) * g^2             # E[g^2]
        dx <- - sqrt(avg_sq_update + epsilon) / sqrt(second_moment + epsilon) * g
        avg_sq_update <- rho * avg_sq_update + (1 - rho) * dx^2           # E[dx^2]
        w <- w + lr * dx

    Defaults ``rho = 0.95``, ``epsilon = 1e-6`` and ``lr = 1`` are the paper's. With
    ``lr != 1`` the accumulated ``dx`` is the unscaled one (as in common implementations),
    so ``lr`` is a pure multiplier on the paper's update.

    Caveats: the first steps are tiny (``~sqrt(epsilon)``) and grow as ``E[dx^2]`` builds
    up. Under lazy updates an absent feature's averages decay in closed form (``rho^k``),
    which is exact without L2 (its update is 0 then); with L2 the ``l2*w`` pull on absent
    features is skipped.
    """

    rho: float = 0.95
    epsilon: float = 1e-6
    proximal = False

    def init_state(self, shape, dtype="float64") -> dict:
        return {"second_moment": np.zeros(shape, dtype), "avg_sq_update": np.zeros(shape, dtype)}

    def update(self, grad, state, lr):
        rho, eps = self.rho, self.epsilon
        second_moment = rho * state["second_moment"] + (1.0 - rho) * np.square(grad)
        dx = -np.sqrt(state["avg_sq_update"] + eps) / np.sqrt(second_moment + eps) * grad
        avg_sq_update = rho * state["avg_sq_update"] + (1.0 - rho) * np.square(dx)
        return lr * dx, {"second_moment": second_moment, "avg_sq_update": avg_sq_update}

    def effective_step(self, state, lr):
        eps = self.epsilon
        return lr * np.sqrt(state["avg_sq_update"] + eps) / np.sqrt(state["second_moment"] + eps)

    def skip(self, state, k):
        f = self.rho**k
        return {"second_moment": f * state["second_moment"], "avg_sq_update": f * state["avg_sq_update"]}


@dataclass(frozen=True)
class RMSProp:
    """RMSProp (Tieleman & Hinton, Coursera "Neural Networks for Machine Learning",
    lecture 6.5, 2012).

    Update rule, per coordinate::

        second_moment <- rho * second_moment + (1 - rho) * g^2
        w <- w - eta * g / (sqrt(second_moment) + epsilon)

    Defaults ``rho = 0.9``, ``epsilon = 1e-8`` (added outside the square root).

    Caveats: no bias correction, so the first step of a coordinate is
    ``eta / sqrt(1 - rho)`` (~3.16 eta) in size. Under lazy updates an absent feature's
    average decays in closed form (``rho^k``), exact without L2; with L2 the ``l2*w`` pull on
    absent features is skipped.
    """

    rho: float = 0.9
    epsilon: float = 1e-8
    proximal = False

    def init_state(self, shape, dtype="float64") -> dict:
        return {"second_moment": np.zeros(shape, dtype)}

    def update(self, grad, state, lr):
        second_moment = self.rho * state["second_moment"] + (1.0 - self.rho) * np.square(grad)
        delta = -lr * grad / (np.sqrt(second_moment) + self.epsilon)
        return delta, {"second_moment": second_moment}

    def effective_step(self, state, lr):
        return lr / (np.sqrt(state["second_moment"]) + self.epsilon)

    def skip(self, state, k):
        return {"second_moment": self.rho**k * state["second_moment"]}


@dataclass(frozen=True)
class Adam:
    """Adam (Kingma & Ba, ICLR 2015, Algorithm 1), with per-coordinate bias correction.

    Update rule, per coordinate, ``n`` being the coordinate's own ``update_count``::

        n <- n + 1
        first_moment  <- beta1 * first_moment  + (1 - beta1) * g
        second_moment <- beta2 * second_moment + (1 - beta2) * g^2
        m_hat <- first_moment / (1 - beta1^n);  v_hat <- second_moment / (1 - beta2^n)
        w <- w - eta * m_hat / (sqrt(v_hat) + epsilon)

    Defaults ``beta1 = 0.9``, ``beta2 = 0.999``, ``epsilon = 1e-8`` (the paper's).

    Caveats: when every coordinate is updated every step, ``n`` is the global step and this
    is Algorithm 1 exactly. Under lazy updates ``n`` counts the steps in which the feature
    was present, so a feature first seen at step 1000 gets the correction meant for its
    own first step (a first update of size ~eta, as for a feature seen at step 1). With the
    global count its moments, which started at 0 when it appeared, would be under-corrected:
    a first step of about ``eta * (1 - beta1) / sqrt(1 - beta2)`` (~3.2 eta) late in training.
    Also under lazy updates the moments of an absent feature decay in closed form
    (``beta^k``) but its weight does not move during the missed steps, whereas dense Adam
    keeps moving it by momentum: an approximation.
    """

    beta1: float = 0.9
    beta2: float = 0.999
    epsilon: float = 1e-8
    proximal = False

    def init_state(self, shape, dtype="float64") -> dict:
        return {
            "first_moment": np.zeros(shape, dtype),
            "second_moment": np.zeros(shape, dtype),
            "update_count": np.zeros(shape, dtype=np.int64),
        }

    def update(self, grad, state, lr):
        b1, b2 = self.beta1, self.beta2
        n = state["update_count"] + 1
        first_moment = b1 * state["first_moment"] + (1.0 - b1) * grad
        second_moment = b2 * state["second_moment"] + (1.0 - b2) * np.square(grad)
        m_hat = first_moment / (1.0 - b1**n)
        v_hat = second_moment / (1.0 - b2**n)
        delta = -lr * m_hat / (np.sqrt(v_hat) + self.epsilon)
        return delta, {"first_moment": first_moment, "second_moment": second_moment, "update_count": n}

    def effective_step(self, state, lr):
        n = state["update_count"]
        with np.errstate(divide="ignore", invalid="ignore"):
            v_hat = np.where(n > 0, state["second_moment"] / (1.0 - self.beta2 ** np.maximum(n, 1)), 0.0)
        return lr / (np.sqrt(v_hat) + self.epsilon)

    def skip(self, state, k):
        return {
            "first_moment": self.beta1**k * state["first_moment"],
            "second_moment": self.beta2**k * state["second_moment"],
            "update_count": state["update_count"].copy(),
        }


@dataclass(frozen=True)
class FTRLProximal:
    """FTRL-Proximal (McMahan et al., KDD 2013, "Ad click prediction: a view from the
    trenches", Algorithm 1), per coordinate, with per-coordinate learning rates.

    State ``shifted_grad_sum`` (the paper's ``z``) and ``sum_sq_grad`` (``n``); ``lr`` is
    ``alpha``, ``beta`` the paper's ``beta`` (default 1), ``l1`` and ``l2`` its ``lambda_1`` and
    ``lambda_2``. Per step, with the weight ``w`` used for the prediction::

        sigma <- (sqrt(n + g^2) - sqrt(n)) / alpha
        z <- z + g - sigma * w
        n <- n + g^2
        w <- 0                                                  if |z| <= lambda_1
             -(z - sign(z) lambda_1) / ((beta + sqrt(n)) / alpha + lambda_2)   otherwise

    Caveats: ``lambda_1`` and ``lambda_2`` act on sums of gradients over all the steps a
    feature was present, not per step as SGD's ``l1`` and ``l2``: a feature whose summed
    gradient never exceeds ``lambda_1`` stays exactly zero. A zero gradient leaves ``z`` and
    ``n`` unchanged, and ``w`` is a function of them, so lazy updates are exact.
    """

    beta: float = 1.0
    proximal = False
    follows_leader = True

    def init_state(self, shape, dtype="float64") -> dict:
        return {"sum_sq_grad": np.zeros(shape, dtype), "shifted_grad_sum": np.zeros(shape, dtype)}

    def step(self, w, grad, state, lr, l1=0.0, l2=0.0):
        """One step of Algorithm 1 on coordinates with weights ``w``: ``(new_w, new_state)``."""
        n, z = state["sum_sq_grad"], state["shifted_grad_sum"]
        n_new = n + np.square(grad)
        sigma = (np.sqrt(n_new) - np.sqrt(n)) / lr
        z = z + grad - sigma * w
        with np.errstate(divide="ignore", invalid="ignore"):
            w_new = np.where(np.abs(z) <= l1, 0.0, -(z - np.sign(z) * l1) / ((self.beta + np.sqrt(n_new)) / lr + l2))
        return w_new, {"sum_sq_grad": n_new, "shifted_grad_sum": z}

    def effective_step(self, state, lr):
        return lr / (self.beta + np.sqrt(state["sum_sq_grad"]))

    def skip(self, state, k):
        return dict(state)


# --------------------------------------------------------------------------- the registry


@dataclass(frozen=True)
class OptimizerSpec:
    """Everything lintext knows about one optimizer, declared once.

    ``rule`` is the rule class of this module (``None`` for L-BFGS, which has no per-coordinate
    rule); its dataclass fields are the hyperparameters, their defaults the defaults (the
    papers'), and its docstring gives the update and the reference. ``code`` is the integer the
    kernels receive (never renumber one). ``default_learning_rate`` is ``None`` when the
    optimizer takes no learning rate. ``state_arrays`` names the per-coordinate arrays of
    ``(n_rows, n_labels)`` the kernels keep (Adam's per-row count lives in the kernels'
    bookkeeping). ``summary`` is the one-line description the command line's help shows.
    """

    name: str
    code: int | None
    rule: type | None
    default_learning_rate: float | None
    state_arrays: tuple[str, ...]
    summary: str
    hinge_learning_rate: float | None = None  # the default under the hinge loss, when it differs

    def learning_rate_for(self, loss: str) -> float | None:
        """The default learning rate under ``loss`` (``"softmax"`` or ``"hinge"``)."""
        return self.hinge_learning_rate if loss == "hinge" and self.hinge_learning_rate else self.default_learning_rate

    @property
    def hyperparameters(self) -> dict:
        """Hyperparameter name -> default, in declaration order."""
        return {} if self.rule is None else {f.name: f.default for f in fields(self.rule)}

    @property
    def has_learning_rate(self) -> bool:
        return self.default_learning_rate is not None

    def make_rule(self, **given):
        """The rule with the given hyperparameters (``None`` keeps the default).

        Raises ``ValueError`` for a hyperparameter this optimizer does not use.
        """
        kwargs = {k: v for k, v in given.items() if v is not None}
        unknown = sorted(set(kwargs) - set(self.hyperparameters))
        if unknown:
            raise ValueError(f"{self.name} does not use {unknown}")
        if self.rule is None:
            raise ValueError(f"{self.name} has no per-coordinate rule")
        return self.rule(**kwargs)


# Default learning rates at the default batch size (8): AdaDelta keeps the paper's 1, FTRL's 0.1 is of the
# order of McMahan et al.'s (not measured), the others measured with lintext's trainer on text-like problems;
# SGD's (3 for softmax, 0.7 for the hinge, the default loss) and AdaGrad's 0.5 by scripts/bench_quality.py (four
# corpora, 5 seeds; table in the README). With unit-norm rows the softmax loss has curvature at most 1/2, so
# plain SGD is stable below 2 / (1/2) = 4 (common practice for a quadratic bound).
OPTIMIZERS = {spec.name: spec for spec in (
    OptimizerSpec("sgd", SGD, PlainSGD, 3.0, (), "plain SGD with a step-size schedule", hinge_learning_rate=0.7),
    OptimizerSpec("adagrad", ADAGRAD, AdaGrad, 0.5, ("sum_sq_grad",), "AdaGrad (Duchi, Hazan & Singer 2011)"),
    OptimizerSpec("adadelta", ADADELTA, AdaDelta, 1.0, ("second_moment", "avg_sq_update"), "AdaDelta (Zeiler 2012)"),
    OptimizerSpec("rmsprop", RMSPROP, RMSProp, 3e-3, ("second_moment",), "RMSProp (Tieleman & Hinton 2012)"),
    OptimizerSpec("adam", ADAM, Adam, 1e-2, ("first_moment", "second_moment"), "Adam (Kingma & Ba 2015)"),
    OptimizerSpec("ftrl", FTRL, FTRLProximal, 0.1, ("sum_sq_grad", "shifted_grad_sum"),
                  "FTRL-Proximal (McMahan et al. 2013), with --l1 and --l2 as its lambda_1 and lambda_2"),
    OptimizerSpec("lbfgs", None, None, None, (), "full-batch L-BFGS (SciPy), the reference"),
)}
# The optimizers that take a learning rate (every one but L-BFGS), in registry order.
STEP_OPTIMIZERS = tuple(name for name, spec in OPTIMIZERS.items() if spec.has_learning_rate)
BY_CODE = {spec.code: spec for spec in OPTIMIZERS.values() if spec.code is not None}


def make_rule(name: str, **hyperparameters):
    """The rule of optimizer ``name`` (see :meth:`OptimizerSpec.make_rule`)."""
    return OPTIMIZERS[name].make_rule(**hyperparameters)


def kernel_hyperparameters(rule) -> dict:
    """``beta1``, ``beta2``, ``rho`` and ``epsilon`` as the kernels take them: the rule's own
    values, and for a hyperparameter the rule does not use a value the kernels never read."""
    neutral = {"beta1": 0.0, "beta2": 0.0, "rho": 0.0, "epsilon": 0.0}
    out = {name: float(getattr(rule, name, value)) for name, value in neutral.items()}
    out["ftrl_beta"] = float(getattr(rule, "beta", 1.0))
    return out


# --------------------------------------------------------------------------- L2 and lazy


def apply_step(rule, w, grad, state, lr, l2=0.0, l1=0.0):
    """One step of ``rule`` on coordinates ``w`` with loss gradient ``grad``.

    Parameters
    ----------
    rule : a rule object of this module
    w, grad : ndarray of the same shape
    state : dict of the rule's state arrays for these coordinates
    lr : float
        This step's learning rate (from the schedule).
    l2 : float
        L2 strength for these coordinates (0 for the bias).
    l1 : float
        FTRL's ``lambda_1`` (SGD's cumulative L1 penalty is not a per-step rule: see
        :func:`lintext.engine.reference.cumulative_l1_replay`).

    Returns
    -------
    new_w, new_state

    Notes
    -----
    Proximal rules (SGD, AdaGrad): ``w <- (w - eta*g) / (1 + eta*l2)`` with ``eta`` the
    rule's per-coordinate step after this step's accumulation. FTRL: its own step with
    ``lambda_1 = l1``, ``lambda_2 = l2``. Other rules: ``w <- w + update(g + l2*w)``.
    """
    if getattr(rule, "follows_leader", False):
        return rule.step(w, grad, state, lr, l1, l2)
    if rule.proximal:
        delta, state = rule.update(grad, state, lr)
        eta = rule.effective_step(state, lr)
        return (w + delta) / (1.0 + eta * l2), state
    delta, state = rule.update(grad + l2 * w, state, lr)
    return w + delta, state


def catch_up(rule, w, state, learning_rates, l2=0.0):
    """Lazy semantics: bring coordinates up to date over missed steps with zero loss gradient.

    Parameters
    ----------
    rule : a rule object of this module
    w : ndarray
        Weights of the absent feature.
    state : dict
        Its state arrays.
    learning_rates : sequence of float
        The step sizes of the missed steps, in order.
    l2 : float

    Returns
    -------
    new_w, new_state

    Notes
    -----
    Proximal rules (SGD, AdaGrad): a zero gradient leaves the state unchanged and the
    prox step only shrinks, so each missed step ``s`` divides ``w`` by ``1 + eta_s*l2``: this
    is exactly what a dense step with ``g = 0`` does. Decaying rules: the state decays in
    closed form (:meth:`skip`) and ``w`` does not move (Adam's momentum step and the
    ``l2*w`` pull of the missed steps are skipped; Adam's ``update_count`` is unchanged).
    """
    if rule.proximal:
        for lr in learning_rates:
            eta = rule.effective_step(state, lr)
            w = w / (1.0 + eta * l2)
        return w, dict(state)
    return np.array(w, copy=True), rule.skip(state, len(learning_rates))
