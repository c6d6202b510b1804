"""Model files and the model registry.

A model is a folder::

    <registry>/<version>/
        model.skops    the fitted estimator (skops format: no pickle code runs on load)
        card.json      the model card, machine-readable
        card.md        the same card for people
        SHA256SUMS     "<sha256>  <file>" for every other file of the folder

:func:`verify_model_dir` refuses a folder unless ``SHA256SUMS`` lists every
other file of the folder by its plain name (no paths, so nothing outside the
folder is ever read), each one a regular file (not a link) whose SHA-256
matches, and the card passes :func:`check_card`. :func:`load_model` then
refuses a ``model.skops`` that is not a readable skops archive, that holds any
type outside :data:`ALLOWED_TYPES` (a plain pickle could run arbitrary code
when loaded; skops only builds allow-listed types), or whose object is not a
fitted :class:`classify.models.PulseClassifier`. Every refusal is a
:class:`features.InputError` naming the file.

The registry is the parent folder of the model folders: ``registry.json`` names
every version and the current one. Writes are atomic (temp file + rename) and
serialised with a lock file. :func:`resolve_model` is the one way a command
turns what the user typed (a model folder, a registry folder, a version,
``current``) into a model folder.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import fcntl
import json
import os
import shutil
import tempfile
from pathlib import Path

from features import InputError
from features._checks import describe_path_kind
from features.atomic import _umask, atomic_write

from ._model_files import (
    CARD_FILE,
    MODEL_FILE,
    SUMS_FILE,
    VERSION_PATTERN,
    _check_archive,
    _check_model,
    _parse_card,
    _read_text,
    check_card,
    file_sha256,
    read_card,
    verify_model_dir,
)

__all__ = ["ALLOWED_TYPES", "ModelRegistry", "save_model", "load_model", "verify_model_dir",
           "file_sha256", "write_card_files", "check_card", "read_card", "resolve_model",
           "DEFAULT_REGISTRY"]

REGISTRY_FILE = "registry.json"
DEFAULT_REGISTRY = "models"

#: Types a model file may contain beyond those skops trusts by default.
ALLOWED_TYPES = (
    "classify.models.PulseClassifier",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
)



def _write_sums(folder: Path) -> None:
    lines = [f"{file_sha256(p)}  {p.name}\n" for p in sorted(folder.iterdir())
             if p.is_file() and p.name != SUMS_FILE]
    atomic_write(folder / SUMS_FILE, "".join(lines).encode())


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
    if folder.exists() and (not folder.is_dir() or any(folder.iterdir())) and not overwrite:
        raise InputError(f"{folder}: already exists; choose another --out (model folders "
                         "are immutable versions)")
    if not VERSION_PATTERN.fullmatch(folder.name):
        raise InputError(f"{folder}: a model folder's name is its version: 1-128 letters, "
                         "digits, '.', '_', '+' or '-' starting with a letter or digit")
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
    features.InputError
        On any failed check of :func:`verify_model_dir`, an archive that skops
        cannot read, a type outside :data:`ALLOWED_TYPES`, an object that is not
        a fitted ``PulseClassifier``, or a card whose classes, features or
        feature schema do not match the model (or this pulsesort).
    """
    folder = Path(folder)
    verify_model_dir(folder)
    card = _parse_card(folder / CARD_FILE)
    path = folder / MODEL_FILE
    _check_archive(path)
    import skops.io as sio  # here, not at import: reading a card needs no scikit-learn

    data = path.read_bytes()  # read once: the load and (on refusal) the type check share it
    # one pass over the archive: skops builds its tree of nodes, audits it against its
    # defaults and the allow-list, then constructs (checking the types first on a tree
    # of its own and loading on another cost a second pass, 0.4 s CPU of 2.8 s for a
    # model of 5 x 80 x 4 trees); only a refused archive is read again to say why
    try:
        model = sio.loads(data, trusted=list(ALLOWED_TYPES))
    except Exception as exc:  # noqa: BLE001 - any failure to load the archive is bad input
        _refuse_archive(path, data, exc)
    _check_model(model, card, path)
    return model, card


def _refuse_archive(path: Path, data: bytes, exc: Exception):
    """Raise the InputError saying why skops refused or failed to load ``data``: an
    unreadable archive, types outside :data:`ALLOWED_TYPES`, or a failed construction."""
    import skops.io as sio

    try:
        untrusted = sio.get_untrusted_types(data=data)
    except Exception as parse:  # noqa: BLE001 - any failure to parse the archive is bad input
        raise InputError(f"{path}: not a readable skops model archive "
                         f"({type(parse).__name__}: {str(parse)[:160]})") from None
    refused = sorted(set(untrusted) - set(ALLOWED_TYPES))
    if refused:
        raise InputError(f"{path}: contains types outside pulsesort's allow-list: "
                         f"{refused}; refusing to load it")
    raise InputError(f"{path}: the model archive cannot be loaded "
                     f"({type(exc).__name__}: {str(exc)[:160]})") from None


class ModelRegistry:
    """The model folders under ``root`` and which one is current.

    Parameters
    ----------
    root : path, default "models"
    """

    def __init__(self, root=DEFAULT_REGISTRY):
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
        """The registry as a dict (an empty one when there is none yet).

        Raises
        ------
        features.InputError
            If ``registry.json`` is not a registry: malformed JSON, or an entry
            whose version or path is not a plain folder name of the registry.
        """
        if describe_path_kind(self.path) == "missing":
            return {"format": "pulsesort-model-registry", "version": 1, "current": None,
                    "models": []}
        try:
            data = json.loads(_read_text(self.path, "the registry"))
        except (ValueError, RecursionError) as exc:
            raise InputError(f"{self.path}: not valid JSON ({str(exc)[:120]})") from None
        if not isinstance(data, dict) or not isinstance(data.get("models"), list):
            raise InputError(f"{self.path}: not a pulsesort model registry")
        for i, m in enumerate(data["models"]):
            if not (isinstance(m, dict) and isinstance(m.get("version"), str)
                    and isinstance(m.get("path"), str)
                    and VERSION_PATTERN.fullmatch(m["path"])):
                raise InputError(f"{self.path}: models[{i}] must have a 'version' and a "
                                 "'path' naming a folder directly in the registry")
        current = data.get("current")
        if current is not None and not isinstance(current, str):
            raise InputError(f"{self.path}: 'current' must be a version name or null")
        return data

    def _write(self, data: dict) -> None:
        atomic_write(self.path, (json.dumps(data, indent=2) + "\n").encode())

    def register(self, folder, *, make_current: bool | None = None) -> str:
        """Add a saved model folder (inside ``root``); return its version.

        ``make_current``: True makes it current; None (default) makes it current
        only when the registry has no current model yet; False never does.
        """
        folder = Path(folder).resolve()
        if folder.parent != self.root.resolve():
            raise InputError(f"{folder}: a registered model must sit directly in the "
                             f"registry folder {self.root.resolve()}")
        sums = verify_model_dir(folder)
        card = _parse_card(folder / CARD_FILE)
        version = folder.name
        entry = {"version": version, "path": version,
                 "created_at": card.get("created_at"),
                 "model_sha256": sums[MODEL_FILE],
                 "training_catalogs": [c.get("catalog_id") for c in
                                       card.get("training_catalogs", [])],
                 "macro_f1": (card.get("metrics") or {}).get("macro_f1")}
        with self._locked():
            data = self.read()
            data["models"] = [m for m in data["models"] if m["version"] != version] + [entry]
            if make_current or (make_current is None and data.get("current") is None):
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
        """A model folder from a version name, "current", or a path: see
        :func:`resolve_model` (this registry being the one to look in)."""
        return resolve_model(name, self.root)

    def _lookup(self, name: str) -> Path:
        data = self.read()
        version = data.get("current") if name == "current" else str(name)
        if version is None:
            raise InputError(f"{self.path if self.path.exists() else self.root}: no current "
                             "model (train one, or promote a version)")
        for m in data["models"]:
            if m["version"] == version:
                return self.root / m["path"]
        known = ", ".join(m["version"] for m in data["models"]) or "none"
        where = self.path if self.path.exists() else f"{self.root} (no {REGISTRY_FILE})"
        raise InputError(f"no model {str(name)!r} in {where} (known versions: {known})")

    def promote(self, version: str) -> None:
        """Make ``version`` the current model (after verifying its files)."""
        folder = self.resolve(version)
        verify_model_dir(folder)
        with self._locked():
            data = self.read()
            if folder.resolve().parent != self.root.resolve() or not any(
                    m["version"] == folder.name for m in data["models"]):
                raise InputError(f"{version!r} is not registered in {self.path}")
            data["current"] = folder.name
            data.setdefault("history", []).append({"current": folder.name, "at": _now()})
            self._write(data)


def resolve_model(name, registry=None) -> Path:
    """The model folder a user means: the one place commands resolve model names.

    Parameters
    ----------
    name : str or path
        A model folder (holding ``model.skops``), a registry folder (holding
        ``registry.json``: its current model), or a version name or
        ``"current"`` looked up in ``registry``.
    registry : path, optional
        The registry for version names; default ``models`` in the working folder.

    Returns
    -------
    pathlib.Path
        The model folder (not yet verified: :func:`load_model` does that).

    Raises
    ------
    features.InputError
        Naming what was looked for and where.
    """
    p = Path(name)
    if (p / MODEL_FILE).exists():
        return p
    if (p / REGISTRY_FILE).exists():
        return ModelRegistry(p)._lookup("current")
    if p.is_dir():
        raise InputError(f"{p}: neither a model folder ({MODEL_FILE}) nor a registry "
                         f"({REGISTRY_FILE})")
    return ModelRegistry(DEFAULT_REGISTRY if registry is None else registry)._lookup(str(name))


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
