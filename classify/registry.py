"""Model files and the model registry.

A model is a folder::

    <registry>/<version>/
        model.skops    the fitted estimator (skops format: no pickle code runs on load)
        card.json      the model card, machine-readable
        card.md        the same card for people
        SHA256SUMS     "<sha256>  <file>" for every other file

:func:`load_model` refuses a folder whose files do not match ``SHA256SUMS`` and a
``model.skops`` holding any type outside :data:`ALLOWED_TYPES` (a plain pickle
could run arbitrary code when loaded; skops only builds allow-listed types).

The registry is the parent folder of the model folders: ``registry.json`` names
every version and the current one. Writes are atomic (temp file + rename) and
serialised with a lock file.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import fcntl
import hashlib
import json
import os
import shutil
import tempfile
from pathlib import Path

from features.atomic import _umask, atomic_write

__all__ = ["ALLOWED_TYPES", "ModelRegistry", "save_model", "load_model", "verify_model_dir",
           "file_sha256", "write_card_files"]

MODEL_FILE = "model.skops"
SUMS_FILE = "SHA256SUMS"
REGISTRY_FILE = "registry.json"

#: Types a model file may contain beyond those skops trusts by default.
ALLOWED_TYPES = (
    "classify.models.PulseClassifier",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
)


def file_sha256(path) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _write_sums(folder: Path) -> None:
    lines = [f"{file_sha256(p)}  {p.name}\n" for p in sorted(folder.iterdir())
             if p.is_file() and p.name != SUMS_FILE and not p.name.startswith(".")]
    atomic_write(folder / SUMS_FILE, "".join(lines).encode())


def verify_model_dir(folder) -> dict[str, str]:
    """Check every file against ``SHA256SUMS``; return {file: sha256}.

    Raises
    ------
    FileNotFoundError
        If the folder, its model file or its checksum file is missing.
    ValueError
        If a file's SHA-256 differs from the recorded one (tampered or corrupted).
    """
    folder = Path(folder)
    sums = folder / SUMS_FILE
    if not (folder / MODEL_FILE).is_file():
        raise FileNotFoundError(f"{folder}: no {MODEL_FILE}; is this a pulsesort model folder?")
    if not sums.is_file():
        raise FileNotFoundError(f"{folder}: no {SUMS_FILE}; refusing to load an unverified "
                                "model")
    recorded = {}
    for i, line in enumerate(sums.read_text(encoding="utf-8").splitlines(), 1):
        parts = line.split("  ", 1)
        if len(parts) != 2 or len(parts[0]) != 64:
            raise ValueError(f"{sums}:{i}: malformed line {line!r}")
        recorded[parts[1]] = parts[0]
    if MODEL_FILE not in recorded:
        raise ValueError(f"{sums}: does not list {MODEL_FILE}")
    for name, expected in recorded.items():
        path = folder / name
        if not path.is_file():
            raise FileNotFoundError(f"{folder}: {name} is listed in {SUMS_FILE} but missing")
        actual = file_sha256(path)
        if actual != expected:
            raise ValueError(f"{path}: SHA-256 is {actual}, but {SUMS_FILE} records "
                             f"{expected}; the file was changed after the model was saved. "
                             "Refusing to load it.")
    return recorded


def write_card_files(folder, card: dict, markdown: str) -> None:
    """(Re)write card.json and card.md of a model folder and refresh SHA256SUMS."""
    folder = Path(folder)
    atomic_write(folder / "card.json", (json.dumps(card, indent=2, sort_keys=True,
                                                    default=str) + "\n").encode())
    atomic_write(folder / "card.md", markdown.encode())
    _write_sums(folder)


def save_model(model, folder, card: dict, markdown: str, *, overwrite: bool = False) -> Path:
    """Save a fitted model with its card into a new folder (atomically).

    The folder is assembled under a temporary name beside ``folder`` and renamed
    at the end, so a crash never leaves a half-written model.
    """
    folder = Path(folder)
    if folder.exists() and any(folder.iterdir()) and not overwrite:
        raise FileExistsError(f"{folder}: already exists; choose another --out (model "
                              "folders are immutable versions)")
    folder.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(dir=folder.parent, prefix=f".{folder.name}.tmp-"))
    os.chmod(tmp, 0o777 & ~_umask())
    try:
        import skops.io as sio

        sio.dump(model, tmp / MODEL_FILE)
        write_card_files(tmp, card, markdown)
        if folder.exists():
            shutil.rmtree(folder)
        os.replace(tmp, folder)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return folder


def load_model(folder):
    """Load ``(model, card)`` from a model folder after verifying it.

    Raises
    ------
    ValueError
        On a checksum mismatch or a type outside :data:`ALLOWED_TYPES`.
    """
    folder = Path(folder)
    import skops.io as sio  # here, not at import: reading a card needs no scikit-learn

    verify_model_dir(folder)
    untrusted = sio.get_untrusted_types(file=folder / MODEL_FILE)
    refused = sorted(set(untrusted) - set(ALLOWED_TYPES))
    if refused:
        raise ValueError(f"{folder / MODEL_FILE}: contains types outside pulsesort's "
                         f"allow-list: {refused}; refusing to load it")
    model = sio.load(folder / MODEL_FILE, trusted=list(untrusted))
    card = json.loads((folder / "card.json").read_text(encoding="utf-8"))
    return model, card


class ModelRegistry:
    """The model folders under ``root`` and which one is current.

    Parameters
    ----------
    root : path, default "models"
    """

    def __init__(self, root="models"):
        self.root = Path(root)

    @property
    def path(self) -> Path:
        return self.root / REGISTRY_FILE

    @contextlib.contextmanager
    def _locked(self):
        self.root.mkdir(parents=True, exist_ok=True)
        with open(self.root / ".registry.lock", "w") as lock:
            fcntl.flock(lock, fcntl.LOCK_EX)
            try:
                yield
            finally:
                fcntl.flock(lock, fcntl.LOCK_UN)

    def read(self) -> dict:
        """The registry as a dict (an empty one when there is none yet)."""
        if not self.path.is_file():
            return {"format": "pulsesort-model-registry", "version": 1, "current": None,
                    "models": []}
        try:
            data = json.loads(self.path.read_text(encoding="utf-8"))
        except json.JSONDecodeError as exc:
            raise ValueError(f"{self.path}: not valid JSON ({exc.msg} at line {exc.lineno})"
                             ) from exc
        if not isinstance(data, dict) or not isinstance(data.get("models"), list):
            raise ValueError(f"{self.path}: not a pulsesort model registry")
        return data

    def _write(self, data: dict) -> None:
        atomic_write(self.path, (json.dumps(data, indent=2) + "\n").encode())

    def register(self, folder, *, make_current: bool | None = None) -> str:
        """Add a saved model folder (inside ``root``); return its version.

        The first model registered becomes current; later ones only when
        ``make_current`` is true (see :meth:`promote`).
        """
        folder = Path(folder).resolve()
        if folder.parent != self.root.resolve():
            raise ValueError(f"{folder}: a registered model must sit directly in the "
                             f"registry folder {self.root.resolve()}")
        sums = verify_model_dir(folder)
        card = json.loads((folder / "card.json").read_text(encoding="utf-8"))
        version = folder.name
        entry = {"version": version, "path": version,
                 "created_at": card.get("created_at"),
                 "model_sha256": sums[MODEL_FILE],
                 "training_catalogs": [c.get("catalog_id") for c in
                                       card.get("training_catalogs", [])],
                 "macro_f1": card.get("metrics", {}).get("macro_f1")}
        with self._locked():
            data = self.read()
            data["models"] = [m for m in data["models"] if m["version"] != version] + [entry]
            if data.get("current") is None or make_current:
                data["current"] = version
                data.setdefault("history", []).append(
                    {"current": version, "at": _now()})
            self._write(data)
        return version

    def versions(self) -> list[dict]:
        return list(self.read()["models"])

    def current(self) -> str | None:
        return self.read().get("current")

    def resolve(self, name) -> Path:
        """A model folder from a version name, "current", or a path."""
        p = Path(name)
        if (p / MODEL_FILE).is_file():
            return p
        data = self.read()
        version = data.get("current") if name == "current" else str(name)
        for m in data["models"]:
            if m["version"] == version:
                return self.root / m["path"]
        known = ", ".join(m["version"] for m in data["models"]) or "none"
        raise FileNotFoundError(f"no model {name!r} in {self.path} (known versions: {known})")

    def promote(self, version: str) -> None:
        """Make ``version`` the current model (after verifying its files)."""
        folder = self.resolve(version)
        verify_model_dir(folder)
        with self._locked():
            data = self.read()
            if not any(m["version"] == folder.name for m in data["models"]):
                raise ValueError(f"{version!r} is not registered in {self.path}")
            data["current"] = folder.name
            data.setdefault("history", []).append({"current": folder.name, "at": _now()})
            self._write(data)


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
