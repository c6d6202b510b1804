"""Model folders from elsewhere: every refusal of the loader, with checksums made to match.

Each case edits a saved model folder the way a careless or hostile sender could
and then rewrites SHA256SUMS so that the checksums alone would let it through:
what must stop it is the allow-list, the archive and type checks, the card
checks and the folder rules. The models are fitted on invented data, for
self-consistency only.
"""

import io
import json
import os
import zipfile

import numpy as np
import pytest
import skops.io as sio
from sklearn.linear_model import LogisticRegression

from classify.cli import main
from classify.models import PulseClassifier
from classify.registry import (
    ModelRegistry,
    check_card,
    load_model,
    resolve_model,
    save_model,
    verify_model_dir,
)
from classify.registry import _write_sums as write_sums
from features import InputError, schema


class Stranger:
    """A type neither skops nor pulsesort trusts."""

    def __init__(self):
        self.x = 1


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(120, 3))
    return PulseClassifier(max_iter=5, n_splits=2, n_reference=30).fit(X, (X[:, 0] > 0))


@pytest.fixture
def folder(tmp_path, fitted):
    card = {"version": "v1", "created_at": "2031-01-01T00:00:00Z",
            "classes": ["False", "True"], "metrics": {"macro_f1": 1.0},
            "feature_schema_version": schema.SCHEMA_VERSION}
    return save_model(fitted, tmp_path / "models" / "v1", card, "# card\n")


def _refused(folder, pattern, capsys=None, *, folder_level=False):
    """load_model refuses; a folder-level refusal also stops `models show` (exit 2)."""
    with pytest.raises(InputError, match=pattern):
        load_model(folder)
    if folder_level:
        assert main(["models", "show", str(folder)]) == 2
    if capsys is not None:
        err = capsys.readouterr().err
        assert "internal error" not in err and "Traceback" not in err


def test_a_good_folder_loads(folder):
    """The saved folder verifies and loads (the baseline of every case below)."""
    model, card = load_model(folder)
    assert isinstance(model, PulseClassifier) and card["version"] == "v1"


def test_not_a_skops_file(folder, capsys):
    """A text file renamed model.skops, checksums updated: refused as not an archive."""
    (folder / "model.skops").write_bytes(b"this is not a zip archive\n")
    write_sums(folder)
    _refused(folder, r"model.skops: not a skops model archive", capsys)


def test_triage_with_an_unreadable_model_exits_2(folder, make_catalog, tmp_path, capsys):
    """Through the command line: exit 2 naming the file, no results file left behind."""
    (folder / "model.skops").write_bytes(b"PK\x03\x04 truncated")
    write_sums(folder)
    cat = make_catalog("cat", np.zeros((4, 400), np.float32),
                       field_meta={"pretrigger_s": 5e-6})
    out = tmp_path / "results.csv"
    assert main(["triage", str(cat), "--model", str(folder), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "model.skops: not a skops model archive" in err and "internal error" not in err
    assert not out.exists()


def test_triage_in_workers_with_an_unreadable_model_exits_2(folder, make_catalog, tmp_path,
                                                          capsys):
    """With --jobs 2 the model loads in a thread beside the workers: its refusal still
    exits 2 naming the file, with no results or partial files left behind."""
    (folder / "model.skops").write_bytes(b"PK\x03\x04 truncated")
    write_sums(folder)
    cat = make_catalog("cat", np.zeros((4, 400), np.float32),
                       field_meta={"pretrigger_s": 5e-6})
    out = tmp_path / "results.csv"
    assert main(["triage", str(cat), "--model", str(folder), "--out", str(out), "--jobs", "2",
                 "--chunk-size", "2"]) == 2
    err = capsys.readouterr().err
    assert "model.skops: not a skops model archive" in err and "internal error" not in err
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith("results")) == []


def test_truncated_archive(folder, capsys):
    """Half an archive, checksums updated: refused naming the file."""
    data = (folder / "model.skops").read_bytes()
    (folder / "model.skops").write_bytes(data[: len(data) // 2])
    write_sums(folder)
    _refused(folder, r"model.skops: not a skops model archive", capsys)


def test_archive_without_schema(folder):
    """A zip that is not a skops archive is refused before skops reads it."""
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.writestr("readme.txt", "hello")
    (folder / "model.skops").write_bytes(buf.getvalue())
    write_sums(folder)
    _refused(folder, r"no schema.json member")


@pytest.mark.parametrize("obj", [{"a": 1}, LogisticRegression()],
                         ids=["dict", "LogisticRegression"])
def test_wrong_object_type(folder, capsys, obj):
    """An archive of trusted types that is not a PulseClassifier is refused by type."""
    sio.dump(obj, folder / "model.skops")
    write_sums(folder)
    _refused(folder, r"model.skops: holds a .*, not a pulsesort PulseClassifier", capsys)


def test_type_outside_allow_list(folder):
    """A type skops does not trust and pulsesort does not allow: refused by name."""
    sio.dump({"model": Stranger()}, folder / "model.skops")
    write_sums(folder)
    _refused(folder, r"outside pulsesort's allow-list.*Stranger")


def test_object_dtype_member(folder, capsys):
    """An array member rewritten to object dtype (pickled data) names the file."""
    path = folder / "model.skops"
    with zipfile.ZipFile(path) as zf:
        members = {i.filename: zf.read(i) for i in zf.infolist()}
    npy = [n for n, b in members.items() if b.startswith(b"\x93NUMPY")]
    assert npy, "the archive stores arrays as .npy members"
    data = members[npy[0]]
    start = data.index(b"'descr': ") + len(b"'descr': ")
    end = data.index(b",", start)
    members[npy[0]] = data[:start] + b"'|O'".ljust(end - start) + data[end:]
    with zipfile.ZipFile(path, "w") as zf:
        for name, b in members.items():
            zf.writestr(name, b)
    write_sums(folder)
    _refused(folder, r"model.skops: the model archive cannot be loaded", capsys)


def test_unfitted_classifier(folder):
    """A PulseClassifier that was never fitted is refused."""
    sio.dump(PulseClassifier(), folder / "model.skops")
    write_sums(folder)
    _refused(folder, r"never fitted")


def test_card_must_be_listed(folder):
    """An edited card whose SHA256SUMS line was removed does not load."""
    card = json.loads((folder / "card.json").read_text())
    card["metrics"]["macro_f1"] = 0.99
    (folder / "card.json").write_text(json.dumps(card))
    lines = (folder / "SHA256SUMS").read_text().splitlines()
    (folder / "SHA256SUMS").write_text("".join(ln + "\n" for ln in lines
                                               if not ln.endswith("card.json")))
    _refused(folder, r"does not list card.json", folder_level=True)


def test_unlisted_extra_file(folder):
    """A file added to the folder after saving is refused."""
    (folder / "extra.py").write_text("print('hello')\n")
    _refused(folder, r"extra.py not listed in SHA256SUMS", folder_level=True)


@pytest.mark.parametrize("name", ["../../etc/passwd", "/etc/passwd", "sub/card.json", ".."])
def test_sums_cannot_name_paths_outside(folder, name):
    """SHA256SUMS may only name plain files of the folder: nothing outside is read."""
    with open(folder / "SHA256SUMS", "a") as fh:
        fh.write("0" * 64 + "  " + name + "\n")
    _refused(folder, r"is not a plain file name of the model folder", folder_level=True)


def test_listed_symlink_is_refused(folder, tmp_path):
    """A listed file that is a link (here to a file outside the folder) is not read."""
    outside = tmp_path / "outside.md"
    outside.write_text("# card\n")
    (folder / "card.md").unlink()
    os.symlink(outside, folder / "card.md")
    write_sums(folder)
    _refused(folder, r"card.md: is not a regular file", folder_level=True)


@pytest.mark.parametrize("field,value,pattern", [
    ("version", "../evil", r"'version' must be"),
    ("version", 7, r"'version' must be"),
    ("classes", "recoil", r"'classes' must be a list of names"),
    ("coverage", 1.5, r"'coverage' must be a number in \(0, 1\)"),
    ("class_priors", {"False": "half"}, r"'class_priors' must map each class"),
    ("metrics", {"macro_f1": "high"}, r"'metrics' must be an object"),
    ("training_catalogs", [{"path": "/x"}], r"'training_catalogs' must be a list"),
])
def test_card_fields_are_checked(folder, field, value, pattern):
    """Card fields are checked for their types (and the version for its pattern)."""
    card = json.loads((folder / "card.json").read_text())
    card[field] = value
    (folder / "card.json").write_text(json.dumps(card))
    write_sums(folder)
    _refused(folder, pattern, folder_level=True)
    with pytest.raises(InputError, match=pattern):
        check_card(card)


def test_card_of_another_feature_schema(folder):
    """A card built on another feature schema is refused: its inputs mean other things."""
    card = json.loads((folder / "card.json").read_text())
    card["feature_schema_version"] = "0.1"
    (folder / "card.json").write_text(json.dumps(card))
    write_sums(folder)
    _refused(folder, r"built on feature schema 0.1")


def test_card_classes_must_be_the_models(folder):
    """The card's classes must be the model's own."""
    card = json.loads((folder / "card.json").read_text())
    card["classes"] = ["recoil", "stepped_leader"]
    (folder / "card.json").write_text(json.dumps(card))
    write_sums(folder)
    _refused(folder, r"'classes' .* are not the model's")


def test_registry_entries_cannot_point_outside(folder):
    """registry.json naming a path outside its folder is refused."""
    reg = ModelRegistry(folder.parent)
    reg.register(folder)
    data = json.loads(reg.path.read_text())
    data["models"][0]["path"] = "../../elsewhere"
    reg.path.write_text(json.dumps(data))
    with pytest.raises(InputError, match=r"models\[0\] must have a 'version' and a 'path'"):
        reg.resolve("v1")


def test_resolve_model_is_one_rule(folder):
    """A model folder, a registry folder, a version and 'current' resolve alike."""
    ModelRegistry(folder.parent).register(folder)
    assert resolve_model(folder) == folder
    assert resolve_model(folder.parent) == folder.parent / "v1"
    assert resolve_model("v1", folder.parent) == folder.parent / "v1"
    assert resolve_model("current", folder.parent) == folder.parent / "v1"
    with pytest.raises(InputError, match=r"no model 'v9'"):
        resolve_model("v9", folder.parent)
    with pytest.raises(InputError, match=r"no model 'v1' in .*nowhere \(no registry.json\)"):
        resolve_model("v1", folder.parent / "nowhere")
    assert verify_model_dir(folder)
