"""Tampered and unreadable model directories: refused at load with one line naming file and field or line.

The cases are the model-file faults of issue 15's fault hunt. The oracle for every check is
the file format itself (model.json's fields, vocabulary.tsv's columns, the .npy header
layout of NumPy's format documentation, numpy.lib.format) and the rule that loading either
gives a model that predicts finite probabilities or refuses with ModelFileError.
"""

from __future__ import annotations

import errno
import io
import json
import shutil
import tracemalloc
import zipfile
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

import lintext
from lintext.cli import app
from lintext.errors import ModelFileError
from lintext.model import Model

BEFORE = Path(__file__).resolve().parent / "data" / "before-layout"


@pytest.fixture
def model_dir(tmp_path):
    return shutil.copytree(BEFORE / "vocabulary", tmp_path / "model")


def edit_json(folder: Path, change) -> None:
    meta = json.loads((folder / "model.json").read_text())
    change(meta)
    (folder / "model.json").write_text(json.dumps(meta))


def edit_vocabulary(folder: Path, line: int, text: bytes) -> None:
    lines = (folder / "vocabulary.tsv").read_bytes().split(b"\n")
    lines[line - 1] = text
    (folder / "vocabulary.tsv").write_bytes(b"\n".join(lines))


def vocabulary_line(folder: Path, line: int) -> list[bytes]:
    return (folder / "vocabulary.tsv").read_bytes().split(b"\n")[line - 1].split(b"\t")


def set_config(name, value):
    return lambda meta: meta["featurizer"]["config"].__setitem__(name, value)


JSON_CASES = [
    ("labels", lambda m: m.__setitem__("labels", ["a", "a", "b"]), "field 'labels'"),
    ("label-surrogate", lambda m: m["labels"].__setitem__(0, "\ud800"), "field 'labels[0]': holds a lone surrogate"),
    ("n-documents-negative", lambda m: m["featurizer"].__setitem__("n_documents", -10),
     "field 'featurizer.n_documents': must be from 1"),
    ("ngrams-float", set_config("ngrams", [1.5, 2]), "field 'featurizer.config.ngrams[0]': must be a whole number, not 1.5"),
    ("weighting", set_config("weighting", 3), "field 'featurizer.config.weighting'"),
    ("normalize", set_config("normalize", "yes"), "field 'featurizer.config.normalize': must be true or false"),
    ("history", lambda m: m.__setitem__("history", "many"), "field 'history': must be a list of epochs, not a string"),
    ("history-entry", lambda m: m["history"][0].__setitem__("dev_loss", [1]), "field 'history[0].dev_loss': must be a number"),
    ("best-epoch", lambda m: m.__setitem__("best_epoch", 99), "field 'best_epoch': must be from 1 to"),
    ("data", lambda m: m.__setitem__("data", [1, 2]), "field 'data': must be an object, not a list"),
    ("training", lambda m: m.__setitem__("training", "sgd"), "field 'training': must be an object"),
    ("training-field", lambda m: m["training"].__setitem__("epochs", "3"), "field 'training.epochs': '3': must be a whole number"),
    ("metrics", lambda m: m.__setitem__("metrics", []), "field 'metrics': must be an object, not a list"),
    ("metrics-value", lambda m: m["metrics"]["dev"].__setitem__("accuracy", "high"), "field 'metrics.dev.accuracy'"),
    ("confusion", lambda m: m["metrics"]["dev"].__setitem__("confusion", [[1, 2]]), "field 'metrics.dev.confusion'"),
    ("explain", lambda m: m.__setitem__("explain", [1]), "field 'explain': must be an object"),
    ("n-features", lambda m: m.__setitem__("n_features", 3), "field 'n_features' is 3 but the featurizer has 324"),
    ("dev-errors", lambda m: m.__setitem__("dev_errors", {"shown": [{"features": "many"}]}),
     "field 'dev_errors.shown[0].features': must be a list of objects"),
]


@pytest.mark.parametrize("name, change, message", JSON_CASES, ids=[c[0] for c in JSON_CASES])
def test_model_json_is_checked_field_by_field(model_dir, name, change, message):
    edit_json(model_dir, change)
    with pytest.raises(ModelFileError) as info:
        Model.load(model_dir)
    assert str(info.value).startswith(f"{model_dir / 'model.json'}: ") and message in str(info.value)


@pytest.mark.parametrize("text, message", [
    ("1" + "0" * 400, "field 'featurizer.n_documents': must be from 1 to"),  # 10^400: a whole number JSON allows
    ("1" * 5000, "not valid JSON (a number too long to read)"),  # more digits than Python reads (4300)
    ("1e400", "field 'featurizer.n_documents': must be a whole number, not inf"),
])
def test_absurd_numbers_in_model_json(model_dir, text, message):
    path = model_dir / "model.json"
    path.write_text(path.read_text().replace('"n_documents": 54', f'"n_documents": {text}'))
    with pytest.raises(ModelFileError, match=message.replace("(", r"\(").replace(")", r"\)")):
        Model.load(model_dir)


def test_deeply_nested_model_json(model_dir):
    (model_dir / "model.json").write_text("[" * 100000 + "]" * 100000)
    with pytest.raises(ModelFileError, match="nested too deeply"):
        Model.load(model_dir)


def test_vocabulary_faults_name_the_line(model_dir):
    first = vocabulary_line(model_dir, 3)
    cases = [
        (b"\t".join([vocabulary_line(model_dir, 2)[0], first[1], first[2]]), "line 3: feature"),  # a name twice
        (b"\xff\xfe" + b"\t".join(first), "line 3: not valid UTF-8"),
        (b"\t".join(first[:2] + [b"-4"]), "line 3: document frequency -4 out of range"),
        (b"\t".join(first[:2] + [str(2**63).encode()]), "line 3: document frequency 9223372036854775808 out of range"),
        (b"\t".join(first[:2] + [b"55"]), "line 3: document frequency 55 outside 0..54"),  # 54 training documents
    ]
    for text, message in cases:
        bad = shutil.copytree(model_dir, model_dir.parent / f"v{len(message)}-{text[:2].hex()}")
        edit_vocabulary(bad, 3, text)
        with pytest.raises(ModelFileError) as info:
            Model.load(bad)
        assert str(info.value).startswith(str(bad / "vocabulary.tsv")) and message in str(info.value), str(info.value)


def test_character_ngrams_with_a_word_vocabulary(model_dir):
    edit_json(model_dir, set_config("char_ngrams", [3, 5]))
    with pytest.raises(ModelFileError, match="character n-grams but the vocabulary has none"):
        Model.load(model_dir)


def write_npz_members(path: Path, members: dict, compress=zipfile.ZIP_STORED) -> None:
    with zipfile.ZipFile(path, "w", compress) as archive:
        for name, data in members.items():
            if callable(data):
                with archive.open(name, "w") as fh:
                    data(fh)
            else:
                archive.writestr(name, data)


def npy_header(shape, descr="<f8") -> bytes:
    buffer = io.BytesIO()
    np.lib.format.write_array_header_1_0(buffer, {"descr": descr, "fortran_order": False, "shape": shape})
    return buffer.getvalue()


def npy(array) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


def intercept(folder: Path) -> bytes:
    with np.load(folder / "weights.npz") as weights:
        return npy(weights["intercept"])


def load_peak(folder: Path) -> tuple[str, int]:
    """The error of loading ``folder`` and the peak of memory traced while trying (NumPy reports to tracemalloc)."""
    tracemalloc.start()
    try:
        with pytest.raises(ModelFileError) as info:
            Model.load(folder)
        return str(info.value), tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def test_a_header_claiming_a_huge_shape_is_refused_before_allocating(model_dir):
    # (10^12, 7) float64 would be 56 TB; the refusal must come from the header alone.
    write_npz_members(model_dir / "weights.npz", {"coef.npy": npy_header((10**12, 7)) + b"\0" * 64,
                                                  "intercept.npy": intercept(model_dir)})
    message, peak = load_peak(model_dir)
    assert "array 'coef' has shape (1000000000000, 7), expected (324, 3)" in message
    assert peak < 50 * 2**20


def test_a_zip_bomb_is_refused_before_inflating(model_dir):
    # A 256 MiB member of zeros deflates to about 250 KiB; its header has the expected shape
    # (324 x 3 float64 = 7,776 bytes), so only the member's declared size gives it away.
    def zeros(fh):
        fh.write(npy_header((324, 3)))
        chunk = b"\0" * 2**24
        for _ in range(16):
            fh.write(chunk)

    write_npz_members(model_dir / "weights.npz", {"coef.npy": zeros, "intercept.npy": intercept(model_dir)},
                      zipfile.ZIP_DEFLATED)
    assert (model_dir / "weights.npz").stat().st_size < 2**20
    message, peak = load_peak(model_dir)
    assert "array 'coef' is stored as 268,435,584 bytes where its header implies 7,904" in message
    assert peak < 50 * 2**20


def test_objects_in_an_array_are_never_unpickled(model_dir):
    write_npz_members(model_dir / "weights.npz", {"coef.npy": npy(np.array([{"a": 1}] * 3, dtype=object)),
                                                  "intercept.npy": intercept(model_dir)})
    with pytest.raises(ModelFileError, match="holds Python objects"):
        Model.load(model_dir)


def test_weights_that_would_predict_nan_are_refused(model_dir):
    # 1e308 is finite (float64's largest is 1.797e308, IEEE 754), but a sum of two such
    # products overflows to inf, and softmax of inf - inf is NaN.
    np.savez(model_dir / "weights.npz", coef=np.full((324, 3), 1e308), intercept=np.zeros(3))
    with pytest.raises(ModelFileError, match="would give non-finite scores"):
        Model.load(model_dir)


def test_the_model_loads_and_predicts_finite_probabilities_untampered(model_dir):
    model = lintext.open_model(model_dir)
    assert np.isfinite(model.probabilities(["the tap water is brown"])).all()


@pytest.mark.parametrize("failure", [PermissionError(errno.EACCES, "Permission denied"), OSError(errno.EIO, "Input/output error")])
def test_unreadable_model_files_are_named(model_dir, monkeypatch, failure):
    # Root reads any file, so the operating system's refusal is simulated where lintext opens model.json.
    import builtins

    real_open = builtins.open

    def failing_open(path, *args, **kwargs):
        if str(path).endswith("model.json"):
            raise type(failure)(failure.errno, failure.strerror, str(path))
        return real_open(path, *args, **kwargs)

    monkeypatch.setattr(builtins, "open", failing_open)
    with pytest.raises(ModelFileError) as info:
        Model.load(model_dir)
    assert str(info.value) == f"{model_dir / 'model.json'}: cannot be read ({failure.strerror})"


def test_tampered_model_through_the_command_line(model_dir, tiny_csv):
    edit_json(model_dir, set_config("ngrams", [1.5, 2]))
    result = CliRunner().invoke(app, ["predict", str(model_dir), str(tiny_csv)])
    assert result.exit_code == 2 and result.stdout == ""
    assert result.stderr.strip() == (f"error: {model_dir / 'model.json'}: field 'featurizer.config.ngrams[0]': "
                                     "must be a whole number, not 1.5")


def test_a_lone_surrogate_from_the_python_api_is_a_clean_error(tmp_path):
    from lintext.text.readers import Corpus

    texts = [f"water pressure low {i}" for i in range(6)] + [f"bill too high {i} \ud800" for i in range(6)]
    corpus = Corpus(texts, ["water"] * 6 + ["billing"] * 6, [f"mem:{i}" for i in range(12)])
    model = lintext.build_model(corpus, dev_fraction=0, featurizer={"char_ngrams": (1, 2), "min_df": 1},
                                options={"epochs": 1})
    with pytest.raises(lintext.LinTextError, match=r"'\\ud800' is a lone surrogate"):
        model.save(tmp_path / "m")
    assert list(tmp_path.iterdir()) == []
