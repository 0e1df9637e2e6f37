"""Featurizer options: a dataclass that round-trips through JSON, and its checks.

Kept apart from :mod:`lintext.text.featurizer` so that reading the options (the command
line's defaults and help) does not load scikit-learn.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from numbers import Integral

from ..errors import ConfigError, ModelFileError

WEIGHTINGS = ("binary", "count", "log", "tfidf", "log-tfidf")
HASH_SPACE_LIMITS = (16, 2**28)


@dataclass
class FeaturizerConfig:
    """Featurizer options; every field round-trips through JSON."""

    ngrams: tuple[int, int] = (1, 2)
    char_ngrams: tuple[int, int] | None = None
    min_df: float = 2
    max_df: float = 1.0
    max_features: int | None = None
    weighting: str = "log-tfidf"
    normalize: bool = True
    lowercase: bool = True
    hash_space: int | None = None

    def __post_init__(self):
        self.ngrams = tuple(self.ngrams)
        if self.char_ngrams is not None:
            self.char_ngrams = tuple(self.char_ngrams)

    def validate(self) -> "FeaturizerConfig":
        _check_range("--ngrams", self.ngrams)
        if self.char_ngrams is not None:
            _check_range("--char-ngrams", self.char_ngrams)
        if self.weighting not in WEIGHTINGS:
            raise ConfigError("--weighting", self.weighting, f"choose one of {', '.join(WEIGHTINGS)}")
        _check_df("--min-df", self.min_df)
        _check_df("--max-df", self.max_df)
        if self.max_features is not None and self.max_features < 1:
            raise ConfigError("--max-features", self.max_features, "must be a positive number of features")
        lo, hi = HASH_SPACE_LIMITS
        if self.hash_space is not None and (isinstance(self.hash_space, bool) or not isinstance(self.hash_space, Integral)
                                            or not lo <= self.hash_space <= hi):
            raise ConfigError("--hash-space", self.hash_space, f"a number of columns from {lo} to 2^28 ({hi:,})")
        if self.hash_space is not None and self.max_features is not None:
            raise ConfigError("--max-features", self.max_features, "has no meaning with --hash-space")
        return self

    def to_json(self) -> dict:
        out = asdict(self)
        out["ngrams"] = list(self.ngrams)
        out["char_ngrams"] = None if self.char_ngrams is None else list(self.char_ngrams)
        return out

    @property
    def hashing(self) -> bool:
        """True when features are hashed into ``hash_space`` columns instead of a vocabulary."""
        return self.hash_space is not None

    @classmethod
    def from_json(cls, data: dict) -> "FeaturizerConfig":
        data = dict(data)
        if "hash_bits" in data:  # written before the hashed space was given as a number of columns
            bits = data.pop("hash_bits")
            data["hash_space"] = None if bits is None else 2 ** int(bits)
        known = set(cls.__dataclass_fields__)
        unknown = set(data) - known
        if unknown:
            raise ModelFileError("featurizer", f"unknown featurizer field(s): {', '.join(sorted(unknown))}")
        return cls(**data).validate()


def parse_range(option: str, text: str) -> tuple[int, int]:
    """Parse ``"1-2"`` (or ``"2"``) into an n-gram range, validated."""
    parts = str(text).split("-")
    try:
        lo, hi = (int(parts[0]), int(parts[-1])) if len(parts) <= 2 else (None, None)
    except ValueError:
        lo = hi = None
    if lo is None:
        raise ConfigError(option, text, "expected a range such as 1-2")
    return _check_range(option, (lo, hi))


def _check_range(option, rng) -> tuple[int, int]:
    lo, hi = rng
    if lo < 1 or hi < lo:
        raise ConfigError(option, f"{lo}-{hi}", "expected LOW-HIGH with 1 <= LOW <= HIGH")
    return lo, hi


def _check_df(option, value):
    if value <= 0 or (isinstance(value, float) and not float(value).is_integer() and value > 1):
        raise ConfigError(option, value, "a count of documents (>= 1) or a fraction in (0, 1]")
