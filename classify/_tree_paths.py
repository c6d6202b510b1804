"""Exact path-based contributions to the raw scores of scikit-learn's HistGradientBoostingClassifier.

Each tree's decision path is walked as the predictor walks it (``x <= num_threshold``
goes left, NaN follows ``missing_go_to_left``) and every change of the node value
along it is given to the feature the node splits on. Node values are the
count-weighted means of the leaf values below each node (scikit-learn stores the
leaves with the learning rate applied and internal nodes unshrunk, root 0, so the
stored internal values are not used). What this relies on in scikit-learn's
internals (``_predictors``, ``_baseline_prediction``, the node record fields) is
pinned by ``tests/classify/test_explain.py``. See :mod:`classify.explain`.
"""

from __future__ import annotations

import numpy as np

__all__ = ["tree_score_contributions", "score_tables", "apply_tables", "tree_tables", "leaves"]


def check_nodes(nodes) -> None:
    need = ("value", "count", "feature_idx", "num_threshold", "missing_go_to_left", "left",
            "right", "is_leaf", "is_categorical", "depth")
    missing = [k for k in need if k not in (nodes.dtype.names or ())]
    if missing:
        raise TypeError(f"this scikit-learn's tree nodes lack field(s) {missing}; the "
                        "attribution code needs updating")
    if nodes["is_categorical"].any():
        raise ValueError("categorical splits are not supported by the attributions")


def tree_tables(nodes, n_features):
    """Expected value of every node and the contributions accumulated down to each node.

    Returns
    -------
    value : ndarray, shape (n_nodes,)
        Count-weighted mean of the leaf values below each node (leaves: their value).
    path : ndarray, shape (n_nodes, n_features)
        Sum, per split feature, of the value changes from the root to the node.
    """
    check_nodes(nodes)
    leaf = nodes["is_leaf"].astype(bool)
    left, right = nodes["left"].astype(np.intp), nodes["right"].astype(np.intp)
    feat, depth = nodes["feature_idx"].astype(np.intp), nodes["depth"].astype(np.intp)
    value = np.where(leaf, nodes["value"], 0.0).astype(np.float64)
    weight = np.where(leaf, nodes["count"], 0).astype(np.float64)
    internal = ~leaf
    for d in range(int(depth.max(initial=0)), -1, -1):     # leaves up to the root
        idx = np.flatnonzero(internal & (depth == d))
        wl, wr = weight[left[idx]], weight[right[idx]]
        w = wl + wr
        value[idx] = np.where(w > 0, (wl * value[left[idx]] + wr * value[right[idx]])
                              / np.where(w > 0, w, 1.0),
                              0.5 * (value[left[idx]] + value[right[idx]]))
        weight[idx] = w
    path = np.zeros((len(nodes), n_features))
    for d in range(int(depth.max(initial=0)) + 1):         # root down to the leaves
        idx = np.flatnonzero(internal & (depth == d))
        for child in (left[idx], right[idx]):
            path[child] = path[idx]
            path[child, feat[idx]] += value[child] - value[idx]
    return value, path


def leaves(nodes, X):
    """The leaf each row of ``X`` reaches, as the predictor routes it (NaN included)."""
    leaf = nodes["is_leaf"].astype(bool)
    feat = nodes["feature_idx"].astype(np.intp)
    thr = nodes["num_threshold"]
    nan_left = nodes["missing_go_to_left"].astype(bool)
    left, right = nodes["left"].astype(np.intp), nodes["right"].astype(np.intp)
    rows = np.arange(len(X))
    node = np.zeros(len(X), dtype=np.intp)
    for _ in range(int(nodes["depth"].max(initial=0))):
        at_leaf = leaf[node]
        if at_leaf.all():
            break
        x = X[rows, feat[node]]
        go_left = np.where(np.isnan(x), nan_left[node], x <= thr[node])
        node = np.where(at_leaf, node, np.where(go_left, left[node], right[node]))
    return node


def score_tables(estimator, n_features):
    """Expected raw score per class and, per tree, (class, nodes, path table)."""
    n_classes = len(estimator.classes_)
    k_trees = int(estimator.n_trees_per_iteration_)
    cls = [1] if k_trees == 1 else list(range(k_trees))   # binary: the trees score class 1
    base = np.zeros(n_classes)
    base[cls] = np.asarray(estimator._baseline_prediction, dtype=np.float64).reshape(-1)
    trees = []
    for predictors in estimator._predictors:
        for t, predictor in enumerate(predictors):
            value, path = tree_tables(predictor.nodes, n_features)
            base[cls[t]] += value[0]
            trees.append((cls[t], predictor.nodes, path))
    return base, trees


def apply_tables(trees, X, n_classes):
    out = np.zeros((len(X), n_classes, X.shape[1]))
    for c, nodes, path in trees:
        out[:, c, :] += path[leaves(nodes, X)]
    return out


def tree_score_contributions(estimator, X):
    """Exact path-based contributions to a fitted HistGradientBoostingClassifier's raw scores.

    Parameters
    ----------
    estimator : sklearn.ensemble.HistGradientBoostingClassifier
        Fitted on numerical features (no categorical splits).
    X : ndarray, shape (n_samples, n_features)
        Features (NaN allowed), as the estimator was fitted on.

    Returns
    -------
    base : ndarray, shape (n_classes_est,)
        Expected raw score of each of the estimator's classes.
    contributions : ndarray, shape (n_samples, n_classes_est, n_features)
        ``base + contributions.sum(-1)`` is the raw score of every class: the
        decision function for more than two classes, ``(0, decision)`` for two
        (the raw score of class 0 is 0, so differences are log-odds).
    """
    X = np.asarray(X, dtype=np.float64)
    base, trees = score_tables(estimator, X.shape[1])
    return base, apply_tables(trees, X, len(base))

