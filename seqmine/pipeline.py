"""The pipeline that ties the stages together (``seqmine analyze`` / ``seqmine demo``)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .errors import DataFileError
from .outcomes import Grouping, match_learners

__all__ = ["Prepared", "prepare_sequences", "MIN_GROUP_LEARNERS"]

#: Fewest learners a group may have before the run stops with a message.
MIN_GROUP_LEARNERS = 2


@dataclass
class Prepared:
    """Loaded, grouped and encoded data plus its accounting."""

    db: object
    events: pd.DataFrame
    outcomes: pd.DataFrame
    groups: pd.Series
    rejects: pd.DataFrame
    summary: dict
    encoder: object
    grouping: object


def prepare_sequences(load_result, outcomes, *, encoder, grouping=None, grouping_factory=None,
                      min_group_learners=MIN_GROUP_LEARNERS):
    """Group the learners and encode their events.

    Parameters
    ----------
    load_result : LoadResult
    outcomes : DataFrame from :func:`load_outcomes`
    encoder : Encoder (unfitted)
    grouping : Grouping, optional
    grouping_factory : callable outcomes -> Grouping, optional

    Returns
    -------
    Prepared

    Raises
    ------
    DataFileError
        When no learner has both events and an outcome, or a group is empty or has
        fewer than ``min_group_learners`` learners with events.
    """
    if grouping is None:
        grouping = grouping_factory(outcomes) if grouping_factory else Grouping()
    groups = grouping.fit(outcomes).transform(outcomes)
    mapping, report = match_learners(load_result.events, outcomes, groups)
    names = list(grouping.group_names_)
    if not mapping:
        raise DataFileError(
            "No learner has both events and a group: check that the learner identifiers "
            "in the events and the outcomes match (e.g. same spelling and case).")
    per = report["learners_per_group"]
    if len(names) < 2:
        raise DataFileError(
            f"The outcomes form only one group ({', '.join(map(repr, names))}); comparing "
            f"groups needs at least two: check the label column or use pre/post scores.")
    for name in names:
        if per.get(name, 0) < min_group_learners:
            raise DataFileError(
                f"Group {name!r} has {per.get(name, 0)} learner(s) with events (at least "
                f"{min_group_learners} needed); check the outcomes or choose another "
                f"--grouping rule.")
    db = encoder.fit(load_result.events).transform(load_result.events, groups=mapping,
                                                   group_names=names)
    summary = dict(load_result.summary())
    summary.update({
        "sequences": int(db.n_sequences),
        "tokens": int(db.n_tokens),
        "vocabulary": int(len(db.vocab)),
        "group_names": names,
        "sequences_per_group": {n: int(c) for n, c in zip(names, db.group_sizes())},
        "sequences_without_group": int((db.groups < 0).sum()),
        "learners_per_group": per,
        "grouping": {"rule": grouping.rule, **{k: float(v) for k, v in
                                               getattr(grouping, "thresholds_", {}).items()}},
        "outcome_kind": outcomes.attrs.get("outcome_kind", ""),
        "events_without_outcome": len(report["events_without_outcome"]),
        "outcomes_without_events": len(report["outcomes_without_events"]),
        "outcome_undefined": len(report["outcome_undefined"]),
        "learners_between_cut_points": len(report["no_group"]),
        "pause_edges_seconds": [float(e) for e in encoder.edges_],
        "pause_labels": list(encoder.labels_),
    })
    if "gain" in outcomes.columns:
        g = pd.Series(outcomes["gain"].to_numpy(float), index=outcomes["learner"].to_numpy())
        summary["gain_by_group"] = {
            n: _describe(g[groups.to_numpy() == n].to_numpy()) for n in names}
    return Prepared(db=db, events=load_result.events, outcomes=outcomes, groups=groups,
                    rejects=load_result.rejects, summary=summary, encoder=encoder,
                    grouping=grouping)


def _describe(values):
    v = values[np.isfinite(values)]
    if len(v) == 0:
        return {"n": 0}
    q = np.quantile(v, [0, 0.25, 0.5, 0.75, 1])
    return {"n": int(len(v)), "mean": round(float(v.mean()), 6),
            "min": round(float(q[0]), 6), "q1": round(float(q[1]), 6),
            "median": round(float(q[2]), 6), "q3": round(float(q[3]), 6),
            "max": round(float(q[4]), 6)}
