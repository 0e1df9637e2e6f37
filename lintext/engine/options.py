"""Training options: one dataclass, its defaults (the command line's and the estimator's), its checks.

Every field has a command-line option of the same name in kebab case (``batch_size`` is
``--batch-size``), and values are spelled as they are typed (``schedule="inverse-sqrt"``,
``stop_metric="dev-loss"``, ``updates="dense"``, ``precision="float32"``): the same spelling
appears in ``model.json``, the sweep tables and the report. A bad value raises
:class:`~lintext.errors.ConfigError` naming the option as typed.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import asdict, dataclass, fields

from ..errors import ConfigError
from .losses import LOSS_CODES
from .optimizers import OPTIMIZERS
from .schedules import SCHEDULE_CODES, WITHIN_EPOCH

STOP_METRICS = ("dev-loss", "accuracy", "macro-f1")
# Every rule hyperparameter that is also an option (a rule's dataclass field of the same name).
HYPERPARAMETERS = ("beta1", "beta2", "epsilon", "rho", "initial_sum_sq", "beta")
UPDATES = ("lazy", "dense")
PRECISIONS = ("float64", "float32")
# Keys of model.json written before the options were spelled as typed, and their values.
_OLD_NAMES = {"lazy": ("updates", {True: "lazy", False: "dense"}), "dtype": ("precision", None)}
_OLD_VALUES = {"schedule": {"inverse_sqrt": "inverse-sqrt"}, "stop_metric": {"dev_loss": "dev-loss", "macro_f1": "macro-f1"}}


def flag(field_name: str) -> str:
    """The command-line option of a field: ``batch_size`` -> ``--batch-size``."""
    return "--" + field_name.replace("_", "-")


@dataclass
class TrainOptions:
    """Options of :func:`lintext.engine.trainer.fit`; :meth:`validate` checks them.

    ``learning_rate=None`` takes the optimizer's default (:data:`lintext.engine.optimizers.OPTIMIZERS`).
    ``decay`` is per step (batch) of the ``inverse`` schedules; ``plateau_factor`` multiplies
    the learning rate after an epoch without improvement under ``schedule="plateau"``.
    ``beta1``, ``beta2``, ``epsilon`` and ``rho`` are the rules' hyperparameters (``None``: the
    rule's default); a value for one the optimizer does not use is an error.

    ``batch_size = 8`` was measured as the best compromise on synthetic text-like problems:
    SGD, AdaGrad and Adam reach the dev loss of batch size 1 with fewer, cheaper steps;
    RMSProp and AdaDelta do poorly with batch size 1 under lazy updates and prefer 32 or more.
    The defaults of the loss (the multiclass hinge), the optimizer (plain SGD at 0.7 under the
    hinge, 3 under softmax; its weights averaged from epoch 1), the stop metric (dev macro-F1),
    the patience (15) and the refit on train and dev were chosen by measurement on four corpora
    (``scripts/bench_quality.py``; see the README).

    Remedies for rare features (each off by default unless measured to help; see the README):
    ``average`` (an epoch, 0 = off) averages the weights over every step from the start of that
    epoch on (Polyak & Juditsky 1992), and the averaged weights are what dev scores, early stopping
    and the saved model use (L-BFGS, which takes no steps, ignores it); ``initial_sum_sq`` is where AdaGrad's sum of squared gradients starts;
    ``l1`` is an L1 penalty (SGD: the cumulative penalty of Tsuruoka, Tsujii & Ananiadou 2009,
    with ``l2`` an elastic net; FTRL: its ``lambda_1``); ``beta`` is FTRL's; ``label_weights`` is
    ``"balanced"`` (label ``k`` weighs ``n / (K * n_k)``, scikit-learn's definition) or
    ``"label=weight,..."`` (labels not named weigh 1).

    ``updates="dense"`` updates every coordinate every step (the slow reference); with
    ``l2 > 0`` only SGD and AdaGrad minimise the stated objective under lazy updates (see
    :mod:`lintext.engine.kernels`). ``precision="float32"`` keeps weights and optimizer state in
    float32 (half the memory); arithmetic stays float64. ``threads`` is how many threads large
    batches, the end-of-epoch catch-up and dev scoring may use (``None`` or 0: all of numba's);
    the weights do not depend on it, bit for bit.
    """

    loss: str = "hinge"
    optimizer: str = "sgd"
    learning_rate: float | None = None
    schedule: str = "constant"
    decay: float = 1e-4
    plateau_factor: float = 0.5
    epochs: int = 50
    batch_size: int = 8
    patience: int = 15
    min_improvement: float = 1e-4
    stop_metric: str = "macro-f1"
    l2: float = 0.0
    seed: int = 0
    updates: str = "lazy"
    precision: str = "float64"
    beta1: float | None = None
    beta2: float | None = None
    epsilon: float | None = None
    rho: float | None = None
    threads: int | None = None
    average: int = 1
    initial_sum_sq: float | None = None
    l1: float = 0.0
    beta: float | None = None
    label_weights: str | None = None
    refit: bool = True

    @property
    def lazy(self) -> bool:
        return self.updates == "lazy"

    @property
    def spec(self):
        """This optimizer's entry of the registry."""
        return OPTIMIZERS[self.optimizer]

    def validate(self) -> "TrainOptions":
        """Raise :class:`~lintext.errors.ConfigError` naming the first bad option and its value."""
        _choice("loss", self.loss, tuple(LOSS_CODES))
        _choice("optimizer", self.optimizer, tuple(OPTIMIZERS))
        _choice("schedule", self.schedule, tuple(SCHEDULE_CODES))
        _choice("stop_metric", self.stop_metric, STOP_METRICS)
        _choice("updates", self.updates, UPDATES)
        _choice("precision", self.precision, PRECISIONS)
        if self.learning_rate is not None:
            _number("learning_rate", self.learning_rate, low=0.0, low_open=True)
        _number("decay", self.decay, low=0.0)
        _number("plateau_factor", self.plateau_factor, low=0.0, low_open=True, high=1.0)
        _integer("epochs", self.epochs, low=1)
        _integer("batch_size", self.batch_size, low=1, high=2**31)
        _integer("patience", self.patience, low=0)
        _number("min_improvement", self.min_improvement, low=0.0)
        _number("l2", self.l2, low=0.0)
        _integer("seed", self.seed, low=0, high=2**63 - 1)
        for name in ("beta1", "beta2", "rho"):
            if getattr(self, name) is not None:
                _number(name, getattr(self, name), low=0.0, high=1.0, high_open=True)
        if self.epsilon is not None:
            _number("epsilon", self.epsilon, low=0.0, low_open=True)
        if self.threads is not None:
            _integer("threads", self.threads, low=0)
        _integer("average", self.average, low=0)
        _number("l1", self.l1, low=0.0)
        if self.initial_sum_sq is not None:
            _number("initial_sum_sq", self.initial_sum_sq, low=0.0)
        if self.beta is not None:
            _number("beta", self.beta, low=0.0)
        if self.label_weights is not None:
            parse_label_weights(self.label_weights)
        spec = self.spec
        if self.l1 > 0 and self.optimizer not in ("sgd", "ftrl"):
            raise ConfigError(flag("l1"), self.l1, f"only for --optimizer sgd or ftrl, not {self.optimizer}")
        if self.schedule in WITHIN_EPOCH and self.optimizer != "sgd":
            raise ConfigError(flag("schedule"), self.schedule,
                              f"only for --optimizer sgd; {self.optimizer} adapts its own steps (use constant or plateau)")
        if not spec.has_learning_rate:
            if self.learning_rate is not None:
                raise ConfigError(flag("learning_rate"), self.learning_rate, f"{self.optimizer} takes no learning rate")
            if self.schedule != "constant":
                raise ConfigError(flag("schedule"), self.schedule, f"{self.optimizer} takes no schedule")
        for name in HYPERPARAMETERS:
            if getattr(self, name) is not None and name not in spec.hyperparameters:
                raise ConfigError(flag(name), getattr(self, name), f"not used by --optimizer {self.optimizer}")
        return self

    def base_learning_rate(self) -> float:
        """The learning rate given, or the optimizer's default (NaN for L-BFGS)."""
        if self.learning_rate is not None:
            return float(self.learning_rate)
        default = self.spec.learning_rate_for(self.loss)
        return math.nan if default is None else float(default)

    def make_rule(self):
        """The optimizer's rule with these hyperparameters (``None`` for L-BFGS)."""
        if self.spec.rule is None:
            return None
        given = {name: getattr(self, name) for name in HYPERPARAMETERS}
        return self.spec.make_rule(**{k: v for k, v in given.items() if k in self.spec.hyperparameters})

    def to_json(self) -> dict:
        """The options as written to ``model.json``, with the learning rate actually used filled in."""
        out = asdict(self)
        rate = self.base_learning_rate()
        out["learning_rate"] = rate if math.isfinite(rate) else None
        return out

    @classmethod
    def from_mapping(cls, value) -> "TrainOptions":
        """``None`` (the defaults), a TrainOptions, or a dict of its fields (an unknown key is an error)."""
        if value is None:
            return cls()
        if isinstance(value, cls):
            return value
        if isinstance(value, dict):
            known = {f.name for f in fields(cls)}
            unknown = sorted(set(value) - known)
            if unknown:
                raise ConfigError(flag(unknown[0]), value[unknown[0]], "not a training option")
            return cls(**value)
        raise TypeError(f"expected TrainOptions or dict, got {type(value).__name__}")


def parse_label_weights(value) -> str | dict:
    """``--label-weights``: ``"balanced"``, or ``"label=weight,..."`` as a dict (weights positive
    and finite); a ConfigError naming the option otherwise."""
    text = str(value).strip()
    if text == "balanced":
        return "balanced"
    out = {}
    for part in text.split(","):
        name, sep, number = part.rpartition("=")
        try:
            weight = float(number)
        except ValueError:
            weight = math.nan
        if not sep or not name.strip() or not math.isfinite(weight) or weight <= 0:
            raise ConfigError(flag("label_weights"), value,
                              "expected balanced or label=weight pairs separated by commas, weights above 0")
        if name.strip() in out:
            raise ConfigError(flag("label_weights"), value, f"label {name.strip()!r} given twice")
        out[name.strip()] = weight
    return out


def upgrade_training_json(training: dict) -> dict:
    """Training options read from an older ``model.json``, spelled as today (``lazy`` -> ``updates``,
    ``dtype`` -> ``precision``, ``inverse_sqrt`` -> ``inverse-sqrt``, ``dev_loss`` -> ``dev-loss``)."""
    out = {}
    for key, value in training.items():
        if key in _OLD_NAMES:
            new, values = _OLD_NAMES[key]
            out[new] = values.get(value, value) if values and isinstance(value, bool) else value
        else:
            out[key] = _OLD_VALUES.get(key, {}).get(value, value) if isinstance(value, str) else value
    return out


def _choice(name, value, allowed):
    if value not in allowed:
        raise ConfigError(flag(name), value, f"expected one of {', '.join(allowed)}")


def _number(name, value, low=None, high=None, low_open=False, high_open=False):
    numeric = isinstance(value, numbers.Real) and not isinstance(value, bool)  # NumPy's numbers too
    if not numeric or not math.isfinite(value):
        raise ConfigError(flag(name), value, "must be a finite number")
    if low is not None and (value < low or (low_open and value == low)):
        raise ConfigError(flag(name), value, f"must be {'above' if low_open else 'at least'} {low:g}")
    if high is not None and (value > high or (high_open and value == high)):
        raise ConfigError(flag(name), value, f"must be {'below' if high_open else 'at most'} {high:g}")


def _integer(name, value, low, high=None):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):  # NumPy's integers too
        raise ConfigError(flag(name), value, "must be a whole number")
    if value < low:
        raise ConfigError(flag(name), value, f"must be at least {low}")
    if high is not None and value > high:
        raise ConfigError(flag(name), value, f"must be at most {high}")
