"""``model.json`` checked field by field, type by type, when a model is loaded.

A model file may have been edited, truncated or written by something else; every field the
code reads later is checked here first, so that a wrong one is refused at load with one line
naming the file and the field (``field 'featurizer.config.ngrams[0]': expected a whole
number, found 1.5``) instead of failing later, somewhere else. Fields this version does not
know are kept as they are (a later version may have written them).
"""

from __future__ import annotations

import math
from numbers import Integral, Real

from .engine.options import TrainOptions, upgrade_training_json
from .errors import ConfigError, ModelFileError
from .text.config import WEIGHTINGS

MAX_DOCUMENTS = 2**53  # integers JSON readers agree on (IEEE 754 doubles hold them exactly)


class FieldError(Exception):
    """A wrong field; turned into ModelFileError naming the file by :func:`check_model_json`."""

    def __init__(self, field: str, problem: str):
        super().__init__(f"field '{field}': {problem}")


def check_model_json(meta: dict, path, format_version: int) -> None:
    """Check every field of a parsed ``model.json`` the code relies on; raise ModelFileError naming the field."""
    try:
        _check(meta, format_version)
    except FieldError as exc:
        raise ModelFileError(path, str(exc)) from None


def _check(meta: dict, format_version: int) -> None:
    version = meta.get("format_version")
    if not _is_int(version) or version < 0:
        raise FieldError("format_version", "missing or not a whole number")
    if version > format_version:
        return  # the caller names the newer version
    _optional(meta, "lintext_version", str)
    labels = meta.get("labels")
    if not isinstance(labels, list) or len(labels) < 2:
        raise FieldError("labels", "must be a list of at least two distinct strings")
    for i, label in enumerate(labels):
        text(f"labels[{i}]", label)
    if len(set(labels)) != len(labels):
        raise FieldError("labels", "must be a list of at least two distinct strings (a label appears twice)")
    if meta.get("loss") not in ("softmax", "hinge"):
        raise FieldError("loss", f"must be 'softmax' or 'hinge', not {_shown(meta.get('loss'))}")
    if "n_features" in meta:
        count("n_features", meta["n_features"], 0)
    featurizer = meta.get("featurizer")
    if not isinstance(featurizer, dict):
        raise FieldError("featurizer", "missing or not an object")
    check_featurizer_state(featurizer)
    if "training" in meta:
        check_training(meta["training"])
    history = meta.get("history", [])
    if not isinstance(history, list):
        raise FieldError("history", f"must be a list of epochs, not {_kind(history)}")
    for i, epoch in enumerate(history):
        _flat_numbers(f"history[{i}]", epoch)
    if "best_epoch" in meta and meta["best_epoch"] is not None:
        count("best_epoch", meta["best_epoch"], 1 if history else 0, len(history) if history else None)
    _optional(meta, "stopped_early", bool)
    if "data" in meta:
        _flat_scalars("data", meta["data"])
    if "metrics" in meta:
        check_metrics(meta["metrics"], len(labels))
    if "explain" in meta:
        check_explain(meta["explain"])
    if "dev_errors" in meta:
        check_dev_errors(meta["dev_errors"])
    _optional(meta, "sweep", dict)


def check_featurizer_state(state: dict) -> None:
    config = state.get("config")
    if not isinstance(config, dict):
        raise FieldError("featurizer.config", "missing or not an object")
    where = "featurizer.config"
    _pair(f"{where}.ngrams", config.get("ngrams"))
    if config.get("char_ngrams") is not None:
        _pair(f"{where}.char_ngrams", config["char_ngrams"])
    for name in ("min_df", "max_df"):
        value = config.get(name)
        if not _is_number(value) or not value > 0:
            raise FieldError(f"{where}.{name}", f"must be a positive number, not {_shown(value)}")
    if config.get("max_features") is not None:
        count(f"{where}.max_features", config["max_features"], 1)
    if config.get("weighting") not in WEIGHTINGS:
        raise FieldError(f"{where}.weighting", f"must be one of {', '.join(WEIGHTINGS)}, not {_shown(config.get('weighting'))}")
    for name in ("normalize", "lowercase"):
        if not isinstance(config.get(name), bool):
            raise FieldError(f"{where}.{name}", f"must be true or false, not {_shown(config.get(name))}")
    for name in ("hash_space", "hash_bits"):
        if config.get(name) is not None:
            count(f"{where}.{name}", config[name], 1, 2**28 if name == "hash_space" else 28)
    count("featurizer.n_documents", state.get("n_documents"), 1, MAX_DOCUMENTS)


def check_training(training) -> None:
    if not isinstance(training, dict):
        raise FieldError("training", f"must be an object of training options, not {_kind(training)}")
    try:
        TrainOptions.from_mapping(upgrade_training_json(training)).validate()
    except ConfigError as exc:
        name = exc.option.lstrip("-").replace("-", "_")
        raise FieldError(f"training.{name}", f"{_shown(exc.value)}: {exc.problem}") from None
    except TypeError as exc:
        raise FieldError("training", str(exc)) from None


def check_metrics(metrics, n_labels: int) -> None:
    if not isinstance(metrics, dict):
        raise FieldError("metrics", f"must be an object, not {_kind(metrics)}")
    for name, entry in metrics.items():
        where = f"metrics.{name}"
        if not isinstance(entry, dict):
            raise FieldError(where, f"must be an object, not {_kind(entry)}")
        if "documents" in entry:
            count(f"{where}.documents", entry["documents"], 0)
        for key in ("accuracy", "macro_f1", "weighted_f1"):
            value = entry.get(key)
            if value is not None and (not _is_number(value) or not 0 <= value <= 1):
                raise FieldError(f"{where}.{key}", f"must be a number from 0 to 1, not {_shown(value)}")
        per_label = entry.get("per_label", {})
        if not isinstance(per_label, dict):
            raise FieldError(f"{where}.per_label", f"must be an object, not {_kind(per_label)}")
        for label, row in per_label.items():
            _flat_numbers(f"{where}.per_label.{label}", row)
        if "labels" in entry:
            if not isinstance(entry["labels"], list):
                raise FieldError(f"{where}.labels", f"must be a list of strings, not {_kind(entry['labels'])}")
            for i, label in enumerate(entry["labels"]):
                text(f"{where}.labels[{i}]", label)
        if "confusion" in entry:
            size = len(entry.get("labels", [])) or n_labels
            _matrix(f"{where}.confusion", entry["confusion"], size)


def check_explain(section) -> None:
    if not isinstance(section, dict):
        raise FieldError("explain", f"must be an object, not {_kind(section)}")
    rare = section.get("rare_features", [])
    if not isinstance(rare, list):
        raise FieldError("explain.rare_features", f"must be a list, not {_kind(rare)}")
    for i, item in enumerate(rare):
        where = f"explain.rare_features[{i}]"
        if not isinstance(item, dict):
            raise FieldError(where, f"must be an object, not {_kind(item)}")
        count(f"{where}.column", item.get("column"), 0)
        documents = item.get("documents", [])
        if not isinstance(documents, list) or not all(isinstance(d, dict) for d in documents):
            raise FieldError(f"{where}.documents", "must be a list of objects")
    hashed = section.get("hashed_ngrams")
    if hashed is not None:
        if not isinstance(hashed, dict) or not isinstance(hashed.get("columns", []), list) \
                or not isinstance(hashed.get("ngrams", []), list):
            raise FieldError("explain.hashed_ngrams", "must be an object with the lists 'columns' and 'ngrams'")
        for i, column in enumerate(hashed.get("columns", [])):
            count(f"explain.hashed_ngrams.columns[{i}]", column, 0)
        for i, grams in enumerate(hashed.get("ngrams", [])):
            if not isinstance(grams, list) or not all(isinstance(g, list) and g and isinstance(g[0], str) for g in grams):
                raise FieldError(f"explain.hashed_ngrams.ngrams[{i}]", "must be a list of [n-gram, documents] pairs")


def check_dev_errors(record) -> None:
    """The dev errors recorded at training time (:func:`lintext.explanation.dev_errors`)."""
    if not isinstance(record, dict):
        raise FieldError("dev_errors", f"must be an object, not {_kind(record)}")
    for name in ("documents", "errors", "hinge_on_rare"):
        if name in record:
            count(f"dev_errors.{name}", record[name], 0)
    shown = record.get("shown", [])
    if not isinstance(shown, list):
        raise FieldError("dev_errors.shown", f"must be a list, not {_kind(shown)}")
    for i, item in enumerate(shown):
        where = f"dev_errors.shown[{i}]"
        if not isinstance(item, dict):
            raise FieldError(where, f"must be an object, not {_kind(item)}")
        features = item.get("features", [])
        if not isinstance(features, list) or not all(isinstance(f, dict) for f in features):
            raise FieldError(f"{where}.features", "must be a list of objects")
        for j, feature in enumerate(features):
            _flat_numbers(f"{where}.features[{j}]", {k: v for k, v in feature.items() if not isinstance(v, bool)})


# ---------------------------------------------------------------- small checks


def text(field: str, value) -> str:
    """A string that can be written back as UTF-8 (no lone surrogate)."""
    if not isinstance(value, str) or not value:
        raise FieldError(field, f"must be a non-empty string, not {_shown(value)}")
    try:
        value.encode("utf-8")
    except UnicodeEncodeError as exc:
        raise FieldError(field, f"holds a lone surrogate (\\u{ord(value[exc.start]):04x})") from None
    return value


def count(field: str, value, low: int, high: int | None = None) -> int:
    """A whole number (not a bool, not a float) from ``low`` to ``high``."""
    if not _is_int(value):
        raise FieldError(field, f"must be a whole number, not {_shown(value)}")
    if value < low or (high is not None and value > high):
        limit = f"from {low} to {high:,}" if high is not None else f"at least {low}"
        raise FieldError(field, f"must be {limit}, not {_shown(value)}")
    return value


def _pair(field: str, value) -> None:
    if not isinstance(value, list) or len(value) != 2:
        raise FieldError(field, f"must be a list [low, high] of whole numbers, not {_shown(value)}")
    for i, item in enumerate(value):
        count(f"{field}[{i}]", item, 1, 1000)
    if value[0] > value[1]:
        raise FieldError(field, f"low above high: {value}")


def _matrix(field: str, value, size: int) -> None:
    if not isinstance(value, list) or len(value) != size:
        raise FieldError(field, f"must be a {size} x {size} list of counts")
    for i, row in enumerate(value):
        if not isinstance(row, list) or len(row) != size or not all(_is_int(v) and v >= 0 for v in row):
            raise FieldError(f"{field}[{i}]", f"must be a list of {size} counts")


def _flat_numbers(field: str, value) -> None:
    """An object whose values are numbers (finite), null, true/false, or strings."""
    if not isinstance(value, dict):
        raise FieldError(field, f"must be an object, not {_kind(value)}")
    for key, item in value.items():
        if item is None or isinstance(item, (str, bool)):
            continue
        if not _is_number(item):
            raise FieldError(f"{field}.{key}", f"must be a number, not {_shown(item)}")


def _flat_scalars(field: str, value) -> None:
    if not isinstance(value, dict):
        raise FieldError(field, f"must be an object, not {_kind(value)}")
    for key, item in value.items():
        if item is not None and not isinstance(item, (str, bool)) and not _is_number(item):
            raise FieldError(f"{field}.{key}", f"must be a string or a number, not {_kind(item)}")


def _optional(meta: dict, name: str, kind) -> None:
    if name in meta and meta[name] is not None and not isinstance(meta[name], kind):
        raise FieldError(name, f"must be {kind.__name__}, not {_kind(meta[name])}")


def _is_int(value) -> bool:
    return isinstance(value, Integral) and not isinstance(value, bool)


def _is_number(value) -> bool:
    """A finite real number (not a bool); JSON's 1e400 reads as infinity and is refused."""
    return isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value)


def _kind(value) -> str:
    return {dict: "an object", list: "a list", str: "a string", bool: "true/false", type(None): "null"}.get(
        type(value), "a number" if isinstance(value, Real) else type(value).__name__)


def _shown(value) -> str:
    try:
        text_ = repr(value)
    except ValueError:  # an integer of more than 4300 digits
        return "a number too long to show"
    return text_ if len(text_) <= 40 else text_[:37] + "..."
