"""Model files: checksums, type allow-listing, the registry."""

import json

import numpy as np
import pytest
import skops.io as sio

from classify.cli import main
from classify.models import PulseClassifier
from classify.registry import ModelRegistry, load_model, save_model, verify_model_dir
from features import InputError


class NotAllowed:
    """A type that is not in pulsesort's allow-list."""

    def __init__(self):
        self.x = 1


def _fitted():
    rng = np.random.default_rng(0)
    X = rng.normal(size=(120, 3))
    y = (X[:, 0] > 0).astype(int)
    return PulseClassifier(max_iter=5, n_splits=2, n_reference=30).fit(X, y)


def _save(tmp_path, name="v1"):
    card = {"version": name, "created_at": "2031-01-01T00:00:00Z", "metrics": {"macro_f1": 1}}
    return save_model(_fitted(), tmp_path / "models" / name, card, "# card\n")


def test_save_load_round_trip(tmp_path):
    """A saved model loads and predicts the same probabilities."""
    folder = _save(tmp_path)
    model, card = load_model(folder)
    X = np.random.default_rng(1).normal(size=(10, 3))
    np.testing.assert_allclose(model.predict_proba(X), _fitted().predict_proba(X))
    assert card["version"] == "v1"
    assert set(verify_model_dir(folder)) == {"model.skops", "card.json", "card.md"}


def test_tampered_model_is_refused(tmp_path):
    """One changed byte in model.skops: refused, naming the file and the checksum."""
    folder = _save(tmp_path)
    data = bytearray((folder / "model.skops").read_bytes())
    data[len(data) // 2] ^= 0xFF
    (folder / "model.skops").write_bytes(bytes(data))
    with pytest.raises(InputError, match="model.skops: SHA-256 is .* Refusing to load"):
        load_model(folder)
    assert main(["models", "show", str(folder), "--registry", str(tmp_path / "models")]) == 2


def test_tampered_card_is_refused(tmp_path):
    """Editing the card by hand also breaks the checksum."""
    folder = _save(tmp_path)
    card = json.loads((folder / "card.json").read_text())
    card["metrics"]["macro_f1"] = 0.5
    (folder / "card.json").write_text(json.dumps(card))
    with pytest.raises(ValueError, match="card.json: SHA-256"):
        load_model(folder)


def test_type_outside_allow_list_is_refused(tmp_path):
    """A model file with an unknown type is refused even with matching checksums."""
    folder = _save(tmp_path)
    sio.dump({"model": NotAllowed()}, folder / "model.skops")
    from classify.registry import _write_sums

    _write_sums(folder)
    with pytest.raises(ValueError, match="outside pulsesort's allow-list.*NotAllowed"):
        load_model(folder)


def test_registry_register_promote_and_resolve(tmp_path, capsys):
    """First model is current; promote switches; names and 'current' resolve."""
    reg = ModelRegistry(tmp_path / "models")
    a, b = _save(tmp_path, "v1"), _save(tmp_path, "v2")
    reg.register(a)
    reg.register(b)
    assert reg.current() == "v1"
    assert reg.resolve("current") == reg.root / "v1"
    assert main(["models", "promote", "v2", "--registry", str(reg.root)]) == 0
    assert reg.current() == "v2"
    assert main(["models", "list", "--registry", str(reg.root)]) == 0
    out = capsys.readouterr().out
    assert "* v2" in out and "  v1" in out
    with pytest.raises(InputError, match="known versions: v1, v2"):
        reg.resolve("v9")


def test_model_folders_are_immutable(tmp_path):
    """Saving into an existing model folder is refused."""
    _save(tmp_path, "v1")
    with pytest.raises(InputError, match="already exists"):
        _save(tmp_path, "v1")
