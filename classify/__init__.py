"""pulsesort.classify: label store, classifiers, triage, review and the CLI.

Depends on :mod:`features`; never the other way round. The Python API (every name below
is importable from ``classify``; each is documented where it lives):

- :func:`load_model`: a trained model and its card, by folder, registry version or
  ``"current"`` (:mod:`classify.predict`);
- :func:`predict_catalog`: every pulse of a catalog classified in memory, the same
  columns and values as ``pulsesort triage`` writes; :func:`predict_features`: a model
  applied to a features table (probabilities, relaxed probabilities, novelty);
- :func:`triage_catalog`: a season of any size triaged to a results file (streamed,
  crash-safe, resumable); :func:`read_results` reads such a file back
  (:mod:`classify.triage`);
- :func:`train_from_store`: train, save and register a model on the label store's
  current labels (:mod:`classify.training`);
- :class:`LabelStore`: the append-only SQLite label store (:mod:`classify.labels`);
- :func:`explain_pulses` and :func:`top_reasons`: why the model chose a pulse's class,
  feature by feature (:mod:`classify.explain`).

``import classify`` stays light: these names are loaded on first use (PEP 562), so
scikit-learn is imported only when a model is.

Examples
--------
>>> import classify
>>> sorted(classify.__all__)[:4]
['LabelStore', '__version__', 'explain_pulses', 'load_model']
>>> classify.predict_catalog.__module__
'classify.predict'
"""

from ._version import __version__

__all__ = ["__version__", "load_model", "predict_catalog", "predict_features",
           "triage_catalog", "read_results", "train_from_store", "LabelStore",
           "explain_pulses", "top_reasons"]


def __getattr__(name: str):
    """Load a public name on first use (PEP 562): the heavy modules only when needed."""
    if name in ("load_model", "predict_catalog", "predict_features"):
        from . import predict as module
    elif name in ("triage_catalog", "read_results"):
        from . import triage as module
    elif name == "train_from_store":
        from . import training as module
    elif name == "LabelStore":
        from . import labels as module
    elif name in ("explain_pulses", "top_reasons"):
        from . import explain as module
    else:
        raise AttributeError(f"module 'classify' has no attribute {name!r}")
    value = getattr(module, name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
