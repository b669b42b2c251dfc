"""A generated seven-week greenhouse course log, shared by the benchmarks and the tests.

The log imitates what a course platform records over a term, not a lab hour: 130
learners (by default) work in many sittings spread over seven weeks; the clock
ticks in whole seconds (so quick clicks tie); how much each learner does is very
uneven (log-normal, a few learners do four or five times the median) and one
learner works in a single very long sitting. Within a sitting the actions come
from a small latent-phase process over the greenhouse actions:

- ``setting up``: ``add_seedling``, ``set_light``, ``set_water``, ``set_temperature``;
- ``running trials``: ``advance_week``, ``measure_height``, ``measure_leaves``;
- ``reviewing``: ``open_chart``, ``open_guide``;
- ``off task``: ``paint_pot``, ``reset`` (quick bursts).

Learners with a higher (invented) tendency stay longer in running trials and
reviewing and less in off-task bursts; their normalized gain depends on that
tendency with noise. Every number here is invented; nothing comes from a real
course.

    from _course_log import generate_course_log, write_course_log
    events, outcomes = generate_course_log()            # 95,626 events, 130 learners
    write_course_log("folder")                          # events.csv + outcomes.csv
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

__all__ = ["ACTIONS", "PHASES", "generate_course_log", "write_course_log"]

ACTIONS = ("add_seedling", "set_light", "set_water", "set_temperature", "advance_week",
           "measure_height", "measure_leaves", "open_chart", "open_guide", "paint_pot",
           "reset")

PHASES = ("setting up", "running trials", "reviewing", "off task")

#: emission probabilities of each phase over ACTIONS (rows sum to 1)
_EMIT = np.array([
    [0.25, 0.25, 0.25, 0.19, 0.02, 0.01, 0.01, 0.01, 0.01, 0.00, 0.00],
    [0.01, 0.03, 0.03, 0.02, 0.38, 0.33, 0.18, 0.01, 0.00, 0.00, 0.01],
    [0.01, 0.00, 0.00, 0.00, 0.02, 0.02, 0.02, 0.55, 0.38, 0.00, 0.00],
    [0.02, 0.03, 0.03, 0.02, 0.03, 0.01, 0.00, 0.01, 0.00, 0.55, 0.30],
])
#: median gap in seconds after an action, and its log-sd, per phase
_GAP = {"median": np.array([4.0, 9.0, 25.0, 1.5]), "sd": np.array([0.7, 0.8, 0.8, 0.6])}
#: sittings: log-normal number of events per sitting
_SITTING_MEDIAN, _SITTING_SD = 45.0, 0.7
_DAYS = 49


def _transitions(tendency):
    """Phase transition matrix of a learner with the given tendency (about -2..2)."""
    t = float(np.clip(tendency, -2.0, 2.0))
    off = 0.06 - 0.025 * t                           # chance of drifting off task
    A = np.array([
        [0.70, 0.22 + 0.02 * t, 0.04, 0.0],
        [0.08, 0.80 + 0.03 * t, 0.07, 0.0],
        [0.15, 0.15, 0.62, 0.0],
        [0.20, 0.10, 0.05, 0.62 - 0.03 * t],
    ])
    A[:3, 3] = off
    return A / A.sum(axis=1, keepdims=True)


def generate_course_log(n_learners=130, n_events=95_626, *, seed=7, start="2026-09-07"):
    """Events and outcomes of a generated seven-week course.

    Parameters
    ----------
    n_learners : int
    n_events : int
        Exact number of events in the log.
    seed : int
    start : str
        First day of the course (UTC).

    Returns
    -------
    events : pandas.DataFrame
        ``learner``, ``time`` (ISO 8601, whole seconds, ``Z``), ``action``, sorted by
        time (ties keep each learner's order).
    outcomes : pandas.DataFrame
        ``learner``, ``pre``, ``post``, ``max``.
    """
    rng = np.random.default_rng(seed)
    n = int(n_learners)
    tendency = rng.standard_normal(n)
    # uneven activity: log-normal shares, at least 30 events; the total is exact
    share = rng.lognormal(0.0, 0.75, size=n)
    counts = np.maximum(30, np.floor(share / share.sum() * n_events)).astype(np.int64)
    counts[np.argmax(counts)] += n_events - counts.sum()
    marathon = int(np.argsort(-counts)[1])           # second busiest: one long sitting
    pi = np.array([0.55, 0.2, 0.2, 0.05])
    cum_emit = np.cumsum(_EMIT, axis=1)
    day0 = np.datetime64(start, "s")
    learners, times, actions = [], [], []
    width = len(str(n))
    for i in range(n):
        total = int(counts[i])
        if i == marathon:
            sizes = np.array([total])
        else:
            sizes = []
            left = total
            while left > 0:
                s = int(max(5, round(rng.lognormal(np.log(_SITTING_MEDIAN), _SITTING_SD))))
                sizes.append(min(s, left))
                left -= s
            sizes = np.array(sizes)
        # sittings on distinct days where possible, in the afternoon or evening
        n_sit = len(sizes)
        days = np.sort(rng.choice(_DAYS, size=n_sit, replace=n_sit > _DAYS))
        hours = rng.uniform(13.0, 21.0, size=n_sit)
        begin = days * 86400 + np.round(hours * 3600).astype(np.int64)
        # two sittings on one day: the later one starts two hours after the earlier
        for k in range(1, n_sit):
            begin[k] = max(begin[k], begin[k - 1] + 7200)
        A = _transitions(tendency[i])
        cum_A = np.cumsum(A, axis=1)
        for size, b in zip(sizes, begin):
            phase = np.empty(size, dtype=np.int64)
            u = rng.random(size)
            phase[0] = min(int(np.searchsorted(np.cumsum(pi), u[0], side="right")), 3)
            for t in range(1, size):
                phase[t] = min(int(np.searchsorted(cum_A[phase[t - 1]], u[t], side="right")), 3)
            v = rng.random(size)
            act = (cum_emit[phase] <= v[:, None]).sum(axis=1).clip(0, len(ACTIONS) - 1)
            gap = np.exp(np.log(_GAP["median"][phase]) + _GAP["sd"][phase]
                         * rng.standard_normal(size))
            gap = np.floor(gap).astype(np.int64)       # 1-second clock: quick clicks tie
            t_rel = b + np.concatenate([[0], np.cumsum(gap[:-1])])
            learners.append(np.full(size, i))
            times.append(t_rel)
            actions.append(act)
    learner = np.concatenate(learners)
    t_rel = np.concatenate(times)
    action = np.concatenate(actions)
    order = np.lexsort((np.arange(len(t_rel)), t_rel))
    names = np.array([f"C{j + 1:0{width}d}" for j in range(n)])
    stamps = (day0 + t_rel[order].astype("timedelta64[s]")).astype(str)
    events = pd.DataFrame({"learner": names[learner[order]],
                           "time": np.char.add(stamps.astype(str), "Z"),
                           "action": np.array(ACTIONS)[action[order]]})
    maximum = 20
    pre = rng.binomial(maximum, 1.0 / (1.0 + np.exp(-(-0.2 + 0.3 * tendency))))
    gain = np.clip(0.3 + 0.15 * tendency + 0.1 * rng.standard_normal(n), -0.2, 1.0)
    post = np.clip(pre + np.rint(gain * (maximum - pre)), 0, maximum).astype(np.int64)
    outcomes = pd.DataFrame({"learner": names, "pre": pre, "post": post,
                             "max": np.full(n, maximum)})
    return events, outcomes


def write_course_log(folder, n_learners=130, n_events=95_626, *, seed=7):
    """Write ``events.csv`` and ``outcomes.csv`` of :func:`generate_course_log` to
    ``folder`` (reused when both files exist); returns their paths."""
    folder = Path(folder)
    ev, oc = folder / "events.csv", folder / "outcomes.csv"
    if not (ev.is_file() and oc.is_file()):
        folder.mkdir(parents=True, exist_ok=True)
        events, outcomes = generate_course_log(n_learners, n_events, seed=seed)
        events.to_csv(ev, index=False, lineterminator="\n")
        outcomes.to_csv(oc, index=False, lineterminator="\n")
    return ev, oc
