"""lintext: sparse-feature linear text classifiers, trained and explained.

Public API::

    import lintext
    model = lintext.train("data/demo/train.csv", dev="data/demo/dev.csv", options={"optimizer": "adagrad"})
    model.predict(["the water at the tap looks brown"])
    model.save("models/demo")
    model = lintext.load_model("models/demo")
"""

__version__ = "0.1.0"

from .errors import ConfigError, DivergenceError, InputError, LinTextError, ModelFileError  # noqa: E402
from .features import Featurizer, FeaturizerConfig  # noqa: E402
from .io import Corpus, read_corpus  # noqa: E402
from .model import Model, load_model  # noqa: E402
from .pipeline import evaluate, train  # noqa: E402
from .train import TrainOptions  # noqa: E402
from .estimator import LinTextClassifier  # noqa: E402

__all__ = [
    "ConfigError", "Corpus", "DivergenceError", "Featurizer", "FeaturizerConfig", "InputError", "LinTextClassifier", "LinTextError",
    "Model", "ModelFileError", "TrainOptions", "evaluate", "load_model", "read_corpus", "train",
]
