"""Hostile event logs with real clocks, generated here (all data invented; greenhouse actions).

Each generator is seeded and returns plain pandas tables (or writes files), so the tests
in test_real_clocks.py can state exactly what the tool must say about them.
"""

from __future__ import annotations

import gzip
from pathlib import Path

import numpy as np
import pandas as pd

ACTIONS = ["set_light", "set_water", "set_temperature", "advance_week", "measure_height",
           "measure_leaves", "open_chart", "paint_pot", "reset", "open_guide", "add_seedling"]
EPOCH = pd.Timestamp("1970-01-01", tz="UTC")
START = pd.Timestamp("2026-02-02T08:00:00", tz="UTC")  # a Monday


def outcomes_for(learners, seed=0, *, ties=False):
    """pre/post/max outcomes for ``learners`` (with ``ties``: many equal gains)."""
    rng = np.random.default_rng(seed)
    n = len(learners)
    pre = rng.integers(2, 10, size=n)
    if ties:
        pre = 2 * rng.integers(1, 5, size=n)  # 20 - pre even: half the room is a whole score
        # most learners gain exactly half the room: the median split puts them together
        post = pre + np.where(rng.random(n) < 0.7, (20 - pre) // 2, rng.integers(0, 11, n))
    else:
        post = np.minimum(20, pre + rng.integers(0, 11, size=n))
    return pd.DataFrame({"learner": list(learners), "pre": pre, "post": np.minimum(post, 20),
                         "max": 20})


def one_second_course(n_learners=130, events_per_learner=735, weeks=7, seed=1):
    """A weeks-long online course on a one-second clock (about 10^5 events).

    Learners work in sessions a few times a week; within a session two thirds of the
    gaps are exactly one second (rapid clicks), the rest last seconds to minutes;
    between sessions lie hours to days.
    """
    rng = np.random.default_rng(seed)
    rows = []
    span = weeks * 7 * 86400
    for i in range(n_learners):
        learner = f"u{i + 1:03d}"
        n = int(events_per_learner * rng.uniform(0.6, 1.4))
        n_sessions = int(rng.integers(8, 25))
        cuts = np.sort(rng.choice(np.arange(1, n), n_sessions - 1, replace=False))
        starts = np.sort(rng.uniform(0, span - 86400, n_sessions)).astype(np.int64)
        fast = rng.random(n) < 0.67
        within = np.where(fast, 1, np.maximum(2, np.rint(rng.lognormal(2.3, 1.0, n))))
        within = np.minimum(within, 1500)  # under 25 minutes inside a session
        session_of = np.searchsorted(cuts, np.arange(n), side="right")
        t = np.empty(n, dtype=np.int64)
        free = 0  # sessions never overlap: each starts an hour or more after the last
        for s in range(n_sessions):
            idx = np.flatnonzero(session_of == s)
            if len(idx):
                t0 = max(int(starts[s]), free)
                t[idx] = t0 + np.concatenate([[0], np.cumsum(within[idx][:-1])])
                free = int(t[idx[-1]]) + 3600
        acts = rng.choice(ACTIONS, size=n)
        rows.append(pd.DataFrame({"learner": learner, "t": t, "action": acts}))
    ev = pd.concat(rows, ignore_index=True).sort_values(["t", "learner"], kind="mergesort")
    ev["time"] = (START + pd.to_timedelta(ev["t"], unit="s")).dt.strftime("%Y-%m-%dT%H:%M:%SZ")
    ev = ev[["learner", "time", "action"]].reset_index(drop=True)
    return ev, outcomes_for(sorted(ev["learner"].unique()), seed)


def day_resolution_log(n_learners=120, events=13_000, seed=2):
    """A distance-learning module whose times are dates only: many actions a day,
    repeated clicks on the same day look like duplicates."""
    rng = np.random.default_rng(seed)
    learner = rng.integers(0, n_learners, size=events)
    day = rng.integers(0, 25, size=events)
    action = rng.choice(ACTIONS[:5], size=events, p=[0.4, 0.3, 0.1, 0.1, 0.1])
    dates = (START.tz_localize(None).normalize() + pd.to_timedelta(day, unit="D"))
    ev = pd.DataFrame({"learner": [f"d{k:03d}" for k in learner],
                       "time": dates.strftime("%Y-%m-%d"), "action": action})
    ev = ev.sort_values(["time"], kind="mergesort").reset_index(drop=True)
    return ev, outcomes_for(sorted(ev["learner"].unique()), seed)


def heavy_learner_events(n=100_000, seed=3, name="L9999"):
    """One learner who clicks 100,000 times at one or two seconds apart (a script)."""
    rng = np.random.default_rng(seed)
    gaps = rng.choice([1, 2], size=n, p=[0.8, 0.2])
    t = START + pd.to_timedelta(np.cumsum(gaps), unit="s")
    return pd.DataFrame({"learner": name, "time": t.strftime("%Y-%m-%dT%H:%M:%SZ"),
                         "action": rng.choice(ACTIONS, size=n), "target": "pot1"})


def numeric_log(unit="ms", n_learners=40, per_learner=60, seed=4, relative=False):
    """Times as numbers: epoch seconds, milliseconds or microseconds, or relative."""
    rng = np.random.default_rng(seed)
    scale = {"s": 1, "ms": 1000, "us": 1_000_000}[unit]
    rows = []
    for i in range(n_learners):
        base = 0 if relative else int((START - EPOCH).total_seconds()) + 3600 * i
        gaps = np.maximum(1, np.rint(rng.lognormal(1.8, 0.8, per_learner) * scale))
        t = base * scale + np.concatenate([[0], np.cumsum(gaps[:-1])])
        rows.append(pd.DataFrame({"learner": f"n{i:02d}", "time": t.astype(np.int64),
                                  "action": rng.choice(ACTIONS, size=per_learner)}))
    ev = pd.concat(rows, ignore_index=True)
    ev["time"] = ev["time"].astype(str)
    return ev, outcomes_for(sorted(ev["learner"].unique()), seed)


def mixed_seconds_milliseconds(seed=5):
    """Half the learners logged in epoch seconds, half in epoch milliseconds."""
    s, oc = numeric_log("s", n_learners=20, seed=seed)
    ms, _ = numeric_log("ms", n_learners=20, seed=seed + 1)
    ms["learner"] = ms["learner"].str.replace("n", "m", regex=False)
    ev = pd.concat([s, ms], ignore_index=True)
    return ev, outcomes_for(sorted(ev["learner"].unique()), seed)


def decimal_comma_files(folder, seed=6):
    """Semicolon-separated events with relative times such as 12,5 and outcomes with
    scores such as 7,5 (a spreadsheet in a decimal-comma locale)."""
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(30):
        t = np.round(np.cumsum(rng.lognormal(1.5, 0.7, 40)), 1)
        for k, x in enumerate(t):
            rows.append(f"c{i:02d};{str(x).replace('.', ',')};{ACTIONS[k % len(ACTIONS)]}")
    folder = Path(folder)
    ev = folder / "events.csv"
    ev.write_text("learner;time;action\n" + "\n".join(rows) + "\n", encoding="utf-8")
    oc = folder / "outcomes.csv"
    scores = [f"c{i:02d};{rng.integers(0, 10)},5;{rng.integers(10, 20)},5;20"
              for i in range(30)]
    oc.write_text("learner;pre;post;max\n" + "\n".join(scores) + "\n", encoding="utf-8")
    return ev, oc


def near_matching_ids(seed=7):
    """Events with ids 01..09 and 40.0..., outcomes with 1..9 and 40... ."""
    ev, _ = numeric_log("s", n_learners=20, seed=seed)
    codes = ev["learner"].str[1:].astype(int)
    ev["learner"] = np.where(codes < 10, codes.map(lambda c: f"0{c + 1}"),
                             codes.map(lambda c: f"{c + 30}.0"))
    oc_ids = sorted({str(int(float(x))) for x in ev["learner"]}, key=int)
    return ev, outcomes_for(oc_ids, seed)


def dst_local_log(zone="Europe/Berlin", seed=8):
    """Naive local wall-clock times of learners working through both daylight-saving
    changes of 2026 (the skipped hour on 29 March, the repeated hour on 25 October)."""
    rng = np.random.default_rng(seed)
    rows = []
    for i, night in enumerate(["2026-03-29T01:40:00", "2026-10-25T01:40:00"] * 6):
        t0 = pd.Timestamp(night) + pd.Timedelta(minutes=int(rng.integers(0, 10)))
        gaps = rng.integers(30, 300, size=40)
        wall = t0 + pd.to_timedelta(np.concatenate([[0], np.cumsum(gaps[:-1])]), unit="s")
        rows.append(pd.DataFrame({"learner": f"z{i:02d}",
                                  "time": wall.strftime("%Y-%m-%d %H:%M:%S"),
                                  "action": rng.choice(ACTIONS, size=40)}))
    ev = pd.concat(rows, ignore_index=True)
    return ev, outcomes_for(sorted(ev["learner"].unique()), seed)


def write(folder, events, outcomes, *, name="events.csv", compress=False):
    """Write the tables as CSV (gzip-compressed when asked); return the two paths."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    ev = folder / name
    text = events.to_csv(index=False, lineterminator="\n").encode("utf-8")
    ev.write_bytes(gzip.compress(text, mtime=0) if compress else text)
    oc = folder / "outcomes.csv"
    outcomes.to_csv(oc, index=False, lineterminator="\n")
    return ev, oc
