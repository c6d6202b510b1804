"""Checks of a model folder's files: checksums, card fields, archive, model object.

Private to :mod:`classify.registry`, which documents the model folder and
re-exports :func:`verify_model_dir`, :func:`check_card` and :func:`read_card`.
Every refusal is a :class:`features.InputError` naming the file.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import re
import stat
import zipfile
from pathlib import Path

from features import InputError
from features._checks import describe_path_kind

MODEL_FILE = "model.skops"
CARD_FILE = "card.json"
SUMS_FILE = "SHA256SUMS"
#: A version (and model folder) name: letters, digits, '.', '_', '+', '-'.
VERSION_PATTERN = re.compile(r"[A-Za-z0-9][A-Za-z0-9._+-]{0,127}")
#: Largest SHA256SUMS and card.json read (a model card is a few kB).
MAX_TEXT_BYTES = 16 << 20
#: Largest total uncompressed size of a model archive (a model is tens of MB).
MAX_ARCHIVE_BYTES = 4 << 30


def file_sha256(path) -> str:
    """Hex SHA-256 of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _read_text(path: Path, what: str) -> str:
    """A small text file of a model folder or registry, refused if odd."""
    kind = describe_path_kind(path)
    if kind is not None:
        raise InputError(f"{path}: {what} is {kind}")
    if path.stat().st_size > MAX_TEXT_BYTES:
        raise InputError(f"{path}: {what} is larger than {MAX_TEXT_BYTES >> 20} MiB")
    try:
        return path.read_text(encoding="utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(f"{path}: {what} is not UTF-8 text ({exc.reason} at byte "
                         f"{exc.start})") from None
    except OSError as exc:
        raise InputError(f"{path}: {what} cannot be read ({exc.strerror or exc})") from None


def _plain_name(name: str) -> bool:
    return (name not in ("", ".", "..") and "/" not in name and "\\" not in name
            and "\0" not in name and name == name.strip())


def verify_model_dir(folder) -> dict[str, str]:
    """Check a model folder against ``SHA256SUMS``; return {file: sha256}.

    Every file of the folder other than ``SHA256SUMS`` must be listed, by its
    plain name, and be a regular file (not a link) with the recorded SHA-256;
    ``model.skops`` and ``card.json`` must be there; the card must pass
    :func:`check_card`.

    Raises
    ------
    features.InputError
        Naming the folder or file and what is wrong.
    """
    folder = Path(folder)
    kind = describe_path_kind(folder)
    if kind != "a folder":
        raise InputError(f"{folder}: no such model folder" if kind == "missing" else
                         f"{folder}: is {kind or 'a file'}, not a model folder")
    if describe_path_kind(folder / MODEL_FILE) == "missing":
        raise InputError(f"{folder}: no {MODEL_FILE}; is this a pulsesort model folder?")
    sums = folder / SUMS_FILE
    if describe_path_kind(sums) == "missing":
        raise InputError(f"{folder}: no {SUMS_FILE}; refusing to load an unverified model")
    recorded: dict[str, str] = {}
    for i, line in enumerate(_read_text(sums, SUMS_FILE).splitlines(), 1):
        parts = line.split("  ", 1)
        if len(parts) != 2 or not re.fullmatch(r"[0-9a-f]{64}", parts[0]):
            raise InputError(f"{sums}:{i}: malformed line {line[:100]!r} (expected "
                             "'<64 hex digits>  <file name>')")
        name = parts[1]
        if not _plain_name(name):
            raise InputError(f"{sums}:{i}: {name[:100]!r} is not a plain file name of the "
                             "model folder; refusing to read anything outside it")
        if name == SUMS_FILE or name in recorded:
            raise InputError(f"{sums}:{i}: {name!r} is listed twice or lists the sums file")
        recorded[name] = parts[0]
    for required in (MODEL_FILE, CARD_FILE):
        if required not in recorded:
            raise InputError(f"{sums}: does not list {required}; every file of a model "
                             "folder is checked")
    present = sorted(p.name for p in folder.iterdir() if p.name != SUMS_FILE)
    unlisted = [n for n in present if n not in recorded]
    if unlisted:
        raise InputError(f"{folder}: {', '.join(unlisted)} not listed in {SUMS_FILE}; a "
                         "model folder holds only the files it was saved with")
    for name, expected in recorded.items():
        path = folder / name
        try:
            mode = os.lstat(path).st_mode
        except FileNotFoundError:
            raise InputError(f"{folder}: {name} is listed in {SUMS_FILE} but missing"
                             ) from None
        if not stat.S_ISREG(mode):
            raise InputError(f"{path}: is not a regular file (a link, folder or device); "
                             "refusing to read it")
        actual = file_sha256(path)
        if actual != expected:
            raise InputError(f"{path}: SHA-256 is {actual}, but {SUMS_FILE} records "
                             f"{expected}; the file was changed after the model was saved. "
                             "Refusing to load it.")
    check_card(_parse_card(folder / CARD_FILE), folder / CARD_FILE)
    return recorded


def _parse_card(path: Path) -> dict:
    text = _read_text(path, "the model card")
    try:
        card = json.loads(text)
    except (ValueError, RecursionError) as exc:
        raise InputError(f"{path}: the model card is not valid JSON ({str(exc)[:120]})"
                         ) from None
    if not isinstance(card, dict):
        raise InputError(f"{path}: the model card must be a JSON object, got "
                         f"{type(card).__name__}")
    return card


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def check_card(card: dict, where="card.json") -> dict:
    """Check the fields of a model card that pulsesort reads; return the card.

    ``version`` is required and must match :data:`VERSION_PATTERN`; every other
    field read by a command is checked for its type when present: ``classes``
    and ``features`` (lists of non-empty strings), ``coverage`` (in (0, 1)),
    ``class_priors`` and ``conformal_thresholds`` (a finite number per class),
    ``feature_schema_version``, ``created_at`` (strings), ``metrics`` (an
    object, ``macro_f1`` a number or null), ``training_catalogs`` (objects with
    a string ``catalog_id``) and ``comparisons`` (a list).

    Raises
    ------
    features.InputError
        Naming ``where`` and every field that is wrong.
    """
    bad = []
    version = card.get("version")
    if not isinstance(version, str) or not VERSION_PATTERN.fullmatch(version):
        bad.append(f"'version' must be 1-128 letters, digits, '.', '_', '+' or '-' starting "
                   f"with a letter or digit, got {str(version)[:60]!r}")

    def strings(key):
        v = card.get(key)
        if v is not None and not (isinstance(v, list) and v
                                  and all(isinstance(x, str) and x for x in v)):
            bad.append(f"'{key}' must be a list of names")
            return None
        return v

    classes = strings("classes")
    strings("features")
    for key in ("feature_schema_version", "created_at", "kind"):
        if key in card and not isinstance(card[key], str):
            bad.append(f"'{key}' must be a string")
    cov = card.get("coverage")
    if cov is not None and not (_number(cov) and 0 < cov < 1):
        bad.append(f"'coverage' must be a number in (0, 1), got {str(cov)[:40]}")
    for key in ("class_priors", "conformal_thresholds"):
        v = card.get(key)
        if v is None:
            continue
        if not isinstance(v, dict) or not all(_number(x) for x in v.values()):
            bad.append(f"'{key}' must map each class to a finite number")
        elif classes is not None and set(v) != set(classes):
            bad.append(f"'{key}' must name exactly the card's classes")
    metrics = card.get("metrics")
    if metrics is not None and (not isinstance(metrics, dict) or not (
            metrics.get("macro_f1") is None or _number(metrics.get("macro_f1")))):
        bad.append("'metrics' must be an object whose 'macro_f1' is a number or null")
    cats = card.get("training_catalogs")
    if cats is not None and not (isinstance(cats, list) and all(
            isinstance(c, dict) and isinstance(c.get("catalog_id"), str) for c in cats)):
        bad.append("'training_catalogs' must be a list of objects with a 'catalog_id'")
    if "comparisons" in card and not isinstance(card["comparisons"], list):
        bad.append("'comparisons' must be a list")
    if bad:
        raise InputError([f"{where}: {b}" for b in bad])
    return card


def read_card(folder) -> dict:
    """The verified, checked card of a model folder (:func:`verify_model_dir` first)."""
    folder = Path(folder)
    verify_model_dir(folder)
    return _parse_card(folder / CARD_FILE)


def _check_archive(path: Path) -> None:
    """A zip archive with skops' schema.json and a sane uncompressed size."""
    try:
        with zipfile.ZipFile(path) as zf:
            infos = zf.infolist()
    except (zipfile.BadZipFile, OSError, ValueError) as exc:
        raise InputError(f"{path}: not a skops model archive (a zip file): {exc}") from None
    names = {i.filename for i in infos}
    if "schema.json" not in names:
        raise InputError(f"{path}: not a skops model archive (no schema.json member)")
    total = sum(i.file_size for i in infos)
    if total > MAX_ARCHIVE_BYTES:
        raise InputError(f"{path}: the archive would unpack to {total / 2**30:.1f} GiB, more "
                         f"than the {MAX_ARCHIVE_BYTES >> 30} GiB a model may take")


def _check_model(model, card: dict, path: Path) -> None:
    from features import schema

    from .models import PulseClassifier

    if not isinstance(model, PulseClassifier):
        raise InputError(f"{path}: holds a {type(model).__module__}.{type(model).__name__}, "
                         "not a pulsesort PulseClassifier")
    if not hasattr(model, "classes_"):
        raise InputError(f"{path}: the PulseClassifier in it was never fitted")
    classes = [str(c) for c in model.classes_]
    if card.get("classes") is not None and list(card["classes"]) != classes:
        raise InputError(f"{path.parent / CARD_FILE}: 'classes' {card['classes']} are not the "
                         f"model's {classes}")
    names = getattr(model, "feature_names_in_", None)
    if card.get("features") is not None and names is not None \
            and list(card["features"]) != [str(n) for n in names]:
        raise InputError(f"{path.parent / CARD_FILE}: 'features' are not the model's input "
                         "columns")
    version = card.get("feature_schema_version")
    if version is not None and version != schema.SCHEMA_VERSION:
        raise InputError(f"{path.parent}: built on feature schema {version}, but this "
                         f"pulsesort computes schema {schema.SCHEMA_VERSION}; retrain it")
