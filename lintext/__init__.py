"""lintext: sparse-feature linear text classifiers, trained and explained.

Public API (loaded on first use, so ``import lintext`` is quick)::

    import lintext
    model = lintext.build_model("data/demo/train.csv", dev="data/demo/dev.csv", options={"optimizer": "adagrad"})
    model.classify(["the water at the tap looks brown"])
    model.save("models/demo")
    model = lintext.open_model("models/demo")

Subpackages, lowest layer first: :mod:`lintext.text` (readers, featurizer),
:mod:`lintext.engine` (losses, optimizers, kernels, trainer), then :mod:`lintext.model`,
:mod:`lintext.pipeline`, :mod:`lintext.report`, :mod:`lintext.tuning`,
:mod:`lintext.estimator` and :mod:`lintext.cli`.
"""

__version__ = "0.1.0"

_EXPORTS = {
    "ConfigError": "errors", "DivergenceError": "errors", "InputError": "errors", "LinTextError": "errors",
    "ModelFileError": "errors",
    "Corpus": "text.readers", "ReaderOptions": "text.readers", "read_corpus": "text.readers",
    "Featurizer": "text.featurizer", "FeaturizerConfig": "text.featurizer",
    "TrainOptions": "engine.options",
    "Model": "model", "open_model": "model",
    "build_model": "pipeline", "evaluate": "pipeline",
    "LinTextClassifier": "estimator",
}
__all__ = sorted(_EXPORTS)


def __getattr__(name):
    if name in _EXPORTS:
        import importlib

        value = getattr(importlib.import_module(f"{__name__}.{_EXPORTS[name]}"), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
