"""Learner-level folds: every sample of one learner lands in the same fold.

The one splitter behind cross-validation (:func:`seqmine.validation.crossval.validate`)
and held-out scoring of phase models (:func:`seqmine.phases.select_n_states`). Learners,
not samples, are split with scikit-learn: :class:`~sklearn.model_selection.StratifiedKFold`
over one row per learner when group labels are given (each fold holds each group's
learners in proportion), :class:`~sklearn.model_selection.KFold` otherwise; then each
learner's samples follow it. The same ``random_state`` gives the same folds.
"""

from __future__ import annotations

import numpy as np

from ..errors import ParameterError
from .checks import check_int

__all__ = ["learner_splits"]


def learner_splits(learners, labels=None, *, n_splits=5, loo=False, random_state=0,
                   where="learner_splits"):
    """Split samples into folds so that no learner spans two folds.

    Parameters
    ----------
    learners : array-like of str, shape (n_samples,)
        Learner of each sample; a learner may have several samples (sessions).
    labels : array-like, shape (n_samples,), optional
        Group of each sample, used to stratify (the first sample of a learner
        gives the learner's label). Without labels the folds are not stratified.
    n_splits : int, default 5
        Number of folds over learners (ignored when ``loo``).
    loo : bool, default False
        One fold per learner.
    random_state : int, default 0
        Shuffles learners before the split.
    where : str, default "learner_splits"
        The function named in error messages.

    Returns
    -------
    list of (ndarray, ndarray)
        ``(train_indices, test_indices)`` into the samples, one pair per fold.

    Examples
    --------
    >>> learners = ["a", "a", "b", "c", "d", "e", "f"]
    >>> labels = ["x", "x", "x", "x", "y", "y", "y"]
    >>> for tr, te in learner_splits(learners, labels, n_splits=3):
    ...     print(" ".join(sorted(set(np.asarray(learners)[te]))))
    c e
    b f
    a d
    >>> [te.tolist() for _, te in learner_splits(["a", "b", "a", "c"], n_splits=2)]
    [[1, 3], [0, 2]]
    """
    from sklearn.model_selection import KFold, StratifiedKFold

    learners = np.asarray(learners, dtype=object).astype(str)
    uniq, first, inverse = np.unique(learners, return_index=True, return_inverse=True)
    inverse = inverse.reshape(-1)
    n = len(uniq)
    if labels is not None:
        labels = np.asarray(labels, dtype=object)
        if len(labels) != len(learners):
            raise ParameterError(f"learners has {len(learners)} entries but labels has "
                                 f"{len(labels)}; give one label per sample.")
    if loo:
        if n < 2:
            raise ParameterError(f"Leave-one-learner-out needs at least 2 learners; got {n}.")
        test_sets = [np.array([i]) for i in range(n)]
    else:
        folds = check_int(n_splits, "n_splits", where, minimum=2)
        if n < folds:
            raise ParameterError(
                f"There are {n} learners but {folds} folds were asked for; use at most "
                f"{n} folds (--splits {max(n, 2)}) or leave-one-learner-out (--loo).")
        if labels is None:
            split = KFold(n_splits=folds, shuffle=True, random_state=random_state)
            test_sets = [te for _, te in split.split(np.zeros(n))]
        else:
            lab = np.array([str(v) for v in labels[first]], dtype=object)
            names, counts = np.unique(lab, return_counts=True)
            if len(names) < 2:
                raise ParameterError(
                    f"All {n} learners are in group {names[0]!r}; cross-validation needs "
                    f"learners of at least two groups.")
            small = int(np.argmin(counts))
            if counts[small] < folds:
                raise ParameterError(
                    f"Group {names[small]!r} has {counts[small]} learners, fewer than the "
                    f"{folds} folds, so some fold would hold one group only; use at most "
                    f"{counts[small]} folds (--splits {max(int(counts[small]), 2)}) or "
                    f"leave-one-learner-out (--loo).")
            split = StratifiedKFold(n_splits=folds, shuffle=True, random_state=random_state)
            test_sets = [te for _, te in split.split(np.zeros(n), lab)]
    out = []
    for te_l in test_sets:
        in_test = np.zeros(n, dtype=bool)
        in_test[te_l] = True
        test_mask = in_test[inverse]
        out.append((np.flatnonzero(~test_mask), np.flatnonzero(test_mask)))
    return out
