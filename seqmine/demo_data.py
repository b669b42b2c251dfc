"""Synthetic virtual-greenhouse event logs with planted behaviours, for demos and benchmarks.

The data are invented: no real learner, course or study stands behind them. Each
learner has a latent tendency (a standard normal number). Their session is a shuffled
sequence of *episodes*: short runs of actions drawn from behaviour templates whose
rates depend on the tendency, plus single filler actions. Scores before and after
depend on the realised rates of the planted behaviours, with noise. The ground truth
(planted token patterns, rates per outcome group, every generator parameter and the
seed) is returned beside the data and written next to the files.
"""

from __future__ import annotations

import copy
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ._util.checks import check_int
from .errors import DataFileError, ParameterError
from .mining.patterns import PATTERN_SEPARATOR

__all__ = [
    "ACTIONS",
    "BEHAVIOURS",
    "GreenhouseData",
    "generate_greenhouse",
    "planted_patterns",
    "write_greenhouse",
]

#: Actions of the greenhouse scenario, in vocabulary order.
ACTIONS = (
    "add_seedling",
    "set_light",
    "set_water",
    "set_temperature",
    "advance_week",
    "measure_height",
    "measure_leaves",
    "open_chart",
    "paint_pot",
    "reset",
    "open_guide",
)

#: Planted behaviours: name -> (kind, group the behaviour favours).
BEHAVIOURS = {
    "controlled_comparison": ("productive", "strong"),
    "settings_burst": ("unproductive", "weak"),
    "decorating": ("unproductive", "weak"),
    "look_it_up": ("neutral", "neutral"),
}

FORMAT_VERSION = 1
EVENTS_FILE = "events.csv"
OUTCOMES_FILE = "outcomes.csv"
GROUND_TRUTH_FILE = "ground_truth.json"
#: Seed the shipped data set (``datasets/greenhouse``) was generated with.
SHIPPED_SEED = 20261202

# ---------------------------------------------------------------------------------
# Generator parameters (all written into the ground truth).
_PARAMS = {
    # episodes per 100 events = base * exp(slope * tendency), tendency clipped
    "rate_base_per_100_events": {
        "controlled_comparison": 4.0,
        "settings_burst": 1.6,
        "decorating": 1.0,
        "look_it_up": 0.8,
    },
    "rate_tendency_slope": {
        "controlled_comparison": 0.7,
        "settings_burst": -0.8,
        "decorating": -0.8,
        "look_it_up": 0.0,
    },
    "tendency_clip": 2.5,
    "max_planted_share": 0.8,
    "decorating_run_length": [3, 6],
    "controlled_comparison_setting_probs": {"set_light": 0.4, "set_water": 0.3,
                                            "set_temperature": 0.3},
    "controlled_comparison_measure_probs": {"measure_height": 0.7, "measure_leaves": 0.3},
    "filler_action_probs": {"add_seedling": 0.2, "open_chart": 0.3,
                            "measure_height": 0.3, "measure_leaves": 0.2},
    # pause contexts: lognormal with the given median (s) and log-sd, rounded to whole
    # seconds, at least 1 s
    "pause_lognormal": {"short": [2.0, 0.35], "medium": [11.0, 0.35], "long": [60.0, 0.4]},
    # filler pauses are dealt so that, over the whole data set, each context makes up
    # about this share of all gaps (the default tertile binning then recovers them)
    "pause_context_share": {"short": 0.31, "medium": 0.38, "long": 0.31},
    "score_max": 20,
    # the learners with the highest tendency start at the maximum (planted edge case)
    "pre_at_max_share": 0.005,
    # pre ~ Binomial(max, expit(pre_intercept + pre_slope * tendency))
    "pre_intercept": -0.3,
    "pre_slope": 0.4,
    # true normalized gain = max(floor, intercept + sum(coef * episodes per 100 events)
    #                             + Normal(0, sd))
    "gain_intercept": 0.25,
    "gain_coefficients": {
        "controlled_comparison": 0.05,
        "settings_burst": -0.06,
        "decorating": -0.05,
        "look_it_up": 0.0,
    },
    "gain_noise_sd": 0.1,
    "gain_floor": -0.25,
    "class_size": 24,
    "class_start_offsets_hours": [0.0, 1.5, 4.0, 5.5],
    "learner_start_jitter_seconds": 240,
    # used only with sessions=True
    "second_session_share": 0.3,
    "second_session_days": 7,
}

_BEHAVIOUR_ORDER = tuple(BEHAVIOURS)
_FILLER = len(_BEHAVIOUR_ORDER)          # episode type code of single filler actions
_A = {name: i for i, name in enumerate(ACTIONS)}
_TARGETS = ("pot1", "pot2", "pot3", "all", "height", "leaves",
            "light", "water", "temperature", "growth")
_T = {name: i for i, name in enumerate(_TARGETS)}
_SHORT, _MEDIUM, _LONG = 0, 1, 2
_PAUSE_LABELS = ("short", "medium", "long")
_SETTINGS = ("set_light", "set_water", "set_temperature")
_MEASURES = ("measure_height", "measure_leaves")
_BURST = ("set_light", "set_water", "set_temperature", "advance_week", "reset")


@dataclass
class GreenhouseData:
    """A generated greenhouse data set.

    Attributes
    ----------
    events : pandas.DataFrame
        Columns ``learner``, ``time`` (``datetime64[s, UTC]``; the files hold it as
        ISO 8601 text with zone ``Z``), ``action``, ``target`` (and ``session`` with
        ``sessions=True``); interleaved across learners and sorted by time, as a real
        log.
    outcomes : pandas.DataFrame
        Columns ``learner``, ``pre``, ``post``, ``max`` (integers).
    ground_truth : dict
        Planted behaviours, their token patterns after default encoding, rates per
        outcome group, the generator parameters and the seed (JSON-ready).
    learners : pandas.DataFrame
        Per learner: ``learner``, ``tendency``, ``n_events``, ``gain`` (normalized;
        NaN where ``pre == max``), the number of planted episodes of each behaviour
        (``n_<behaviour>``) and, with sessions, ``n_sessions``. Not written to disk.
    """

    events: pd.DataFrame
    outcomes: pd.DataFrame
    ground_truth: dict
    learners: pd.DataFrame = field(repr=False)


def generate_greenhouse(n_learners=300, *, random_state=SHIPPED_SEED,
                        events_per_learner=(60, 150), start="2026-03-02T09:00:00Z",
                        sessions=False):
    """Generate a synthetic greenhouse event log with planted behaviours.

    Parameters
    ----------
    n_learners : int, default 300
        Number of learners.
    random_state : int, default 20261202
        Seed of the random generator; the same seed gives the same data.
    events_per_learner : (int, int), default (60, 150)
        Inclusive range of the number of events per learner (drawn uniformly).
    start : str, default "2026-03-02T09:00:00Z"
        Start of the first class period (ISO 8601; no zone means UTC). Classes of
        ``class_size`` learners follow at fixed offsets within a school day; after
        five school days two days are skipped (a weekend if ``start`` is a Monday).
    sessions : bool, default False
        Add a ``session`` column (``s1``, ``s2``) and let a share
        (``second_session_share``) of learners continue their work in a second
        session one week later, in the same class period. The split falls between
        episodes, at the first one starting in the second half of the learner's
        events. Everything else (actions, pauses within sessions, scores, ground truth)
        is the same as without sessions.

    Returns
    -------
    GreenhouseData

    Notes
    -----
    Behaviours (episodes; ``S``, ``M``, ``L`` mark the short, medium and long pause
    after each action):

    - ``controlled_comparison`` (productive): one ``set_*`` S ``advance_week`` S
      ``measure_height`` or ``measure_leaves`` L;
    - ``settings_burst`` (unproductive): ``set_light`` S ``set_water`` S
      ``set_temperature`` S ``advance_week`` S ``reset`` M;
    - ``decorating`` (unproductive): 3 to 6 ``paint_pot`` with S between, M after;
    - ``look_it_up`` (neutral): ``open_guide`` S ``open_chart`` M;
    - fillers: single ``add_seedling``, ``open_chart``, ``measure_height`` or
      ``measure_leaves``.

    The number of episodes of each behaviour is Poisson with mean
    ``base * exp(slope * tendency) * n_events / 100``; planted episodes are capped at
    ``max_planted_share`` of a learner's events and fillers make up the rest; the
    episodes of a learner come in random order. Filler pauses are dealt so that short,
    medium and long gaps each make up about a third of all gaps, which puts the
    default tertile pause bins between the contexts.

    The pre-test score is ``Binomial(max, expit(pre_intercept + pre_slope *
    tendency))``, except that the ``round(pre_at_max_share * n_learners)`` learners
    with the highest tendency start at ``pre == max`` (normalized gain undefined: a
    planted, documented edge case; 2 of 300 in the shipped set). The true normalized
    gain is ``max(gain_floor, gain_intercept + sum(coefficient * episodes per 100
    events) + Normal(0, gain_noise_sd))`` and ``post = pre + round(gain * (max -
    pre))`` clipped to ``[0, max]``.

    Examples
    --------
    >>> data = generate_greenhouse(20, random_state=1)
    >>> list(data.events.columns), list(data.outcomes.columns)
    (['learner', 'time', 'action', 'target'], ['learner', 'pre', 'post', 'max'])
    >>> data.events["learner"].nunique()
    20
    >>> data.ground_truth["behaviours"][0]["key_pattern"]
    ['advance_week', 'measure_height', 'pause:long']
    """
    n = check_int(n_learners, "n_learners", "generate_greenhouse", minimum=1)
    seed = check_int(random_state, "random_state", "generate_greenhouse", minimum=0)
    lo, hi = _check_range(events_per_learner)
    t0 = _check_start(start)
    if not isinstance(sessions, (bool, np.bool_)):
        raise ParameterError(
            "The 'sessions' parameter of generate_greenhouse must be True or False. "
            f"Got {sessions!r} instead.")
    p = _PARAMS
    rng = np.random.default_rng(seed)

    tendency = rng.standard_normal(n)
    n_events = rng.integers(lo, hi + 1, size=n)
    ep = _draw_episodes(rng, tendency, n_events, p)
    ev = _expand_events(rng, ep, p)
    gap = _draw_pauses(rng, ev["gap_cls"], p)
    ev_learner = ep["learner"][ev["episode"]]
    learner_start = _learner_starts(rng, n, p)
    # time of event j = learner start + sum of the gaps before j in the same learner
    t_rel = learner_start[ev_learner] + _within_cumsum(gap, ev_learner, n) - gap
    pre, post = _draw_scores(rng, tendency, n_events, ep["counts"], p)
    session = None
    if sessions:
        session = _split_sessions(rng, ev, ev_learner, n_events, p)
        t_rel = t_rel + np.where(session == 1, int(p["second_session_days"]) * 86400, 0)
    order = np.lexsort((np.arange(len(t_rel)), t_rel))

    # -- tables -------------------------------------------------------------------
    width = max(4, len(str(n)))
    names = [f"L{i + 1:0{width}d}" for i in range(n)]
    stamps = np.datetime64(t0, "s") + t_rel[order].astype("timedelta64[s]")
    events = pd.DataFrame({
        "learner": pd.Categorical.from_codes(ev_learner[order], names),
        "time": pd.DatetimeIndex(stamps).tz_localize("UTC"),
        "action": pd.Categorical.from_codes(ev["action"][order], ACTIONS),
        "target": pd.Categorical.from_codes(ev["target"][order], _TARGETS),
    })
    if session is not None:
        events["session"] = pd.Categorical.from_codes(session[order], ["s1", "s2"])
    for col in events.columns:
        if col != "time":
            events[col] = events[col].astype("str")
    maximum = int(p["score_max"])
    outcomes = pd.DataFrame({"learner": names, "pre": pre, "post": post,
                             "max": np.full(n, maximum, dtype=np.int64)})
    with np.errstate(divide="ignore", invalid="ignore"):
        gain = np.where(pre < maximum, (post - pre) / np.maximum(maximum - pre, 1), np.nan)
    learners = pd.DataFrame({"learner": names, "tendency": tendency,
                             "n_events": n_events, "gain": gain})
    for j, b in enumerate(_BEHAVIOUR_ORDER):
        learners[f"n_{b}"] = ep["counts"][:, j]
    if session is not None:
        learners["n_sessions"] = 1 + np.bincount(ev_learner[session == 1], minlength=n).clip(0, 1)
    truth = _ground_truth(
        n=n, seed=seed, lo=lo, hi=hi, start=start, sessions=bool(sessions),
        learners=learners, ep=ep, gap_cls=ev["gap_cls"], gap=gap, ev_learner=ev_learner,
        n_pre_max=int((pre == maximum).sum()))
    return GreenhouseData(events=events, outcomes=outcomes, ground_truth=truth,
                          learners=learners)


def write_greenhouse(folder, n_learners=300, *, random_state=SHIPPED_SEED,
                     events_per_learner=(60, 150), start="2026-03-02T09:00:00Z",
                     sessions=False, events_format="csv"):
    """Generate a greenhouse data set and write it to ``folder``.

    Writes ``events.csv`` (or ``events.jsonl`` / ``events.parquet``), ``outcomes.csv``
    and ``ground_truth.json``. The same arguments give byte-identical files (fixed
    column order, ``\\n`` line ends, integers only in the tables, JSON with sorted keys
    and floats rounded to 6 decimals).

    Parameters
    ----------
    folder : str or Path
        Output folder (created if missing; existing files of the same names are
        replaced).
    n_learners, random_state, events_per_learner, start, sessions
        As in :func:`generate_greenhouse`.
    events_format : {"csv", "jsonl", "parquet"}, default "csv"
        File format of the events (Parquet needs pyarrow).

    Returns
    -------
    dict
        File role (``events``, ``outcomes``, ``ground_truth``) -> written path.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     paths = write_greenhouse(d, 5, random_state=3)
    ...     sorted(p.name for p in paths.values())
    ['events.csv', 'ground_truth.json', 'outcomes.csv']
    """
    if events_format not in ("csv", "jsonl", "parquet"):
        raise ParameterError(
            "The 'events_format' parameter of write_greenhouse must be one of 'csv', "
            f"'jsonl', 'parquet'. Got {events_format!r} instead.")
    data = generate_greenhouse(n_learners, random_state=random_state, events_per_learner=events_per_learner,
                               start=start, sessions=sessions)
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise DataFileError(
            f"{folder}: cannot create the output folder ({exc.strerror or exc}); choose "
            "another folder.") from None
    ev_path = folder / f"events.{events_format}"
    _write_events(data.events, ev_path, events_format)
    out_path = folder / OUTCOMES_FILE
    data.outcomes.to_csv(out_path, index=False, lineterminator="\n")
    gt_path = folder / GROUND_TRUTH_FILE
    gt_path.write_text(json.dumps(data.ground_truth, indent=2, sort_keys=True) + "\n",
                       encoding="utf-8")
    return {"events": ev_path, "outcomes": out_path, "ground_truth": gt_path}


def planted_patterns(ground_truth, *, variants=False):
    """Planted patterns of a ground truth as a tidy table.

    Parameters
    ----------
    ground_truth : dict or str or Path
        The ``ground_truth`` of a :class:`GreenhouseData`, or the path of a
        ``ground_truth.json`` file.
    variants : bool, default False
        Also list every full token form of each episode (``role`` = ``variant``).

    Returns
    -------
    pandas.DataFrame
        Columns ``behaviour``, ``kind`` (productive / unproductive / neutral),
        ``direction`` (the group the behaviour favours: strong / weak / neutral),
        ``role`` (``key`` or ``variant``), ``pattern`` (tokens joined by ``" > "``, as
        in ``patterns.csv``), ``length``, ``share_strong`` and ``share_weak`` (share of
        learners of each group with the key pattern as planted; empty for variants).

    Examples
    --------
    >>> gt = generate_greenhouse(30, random_state=2).ground_truth
    >>> planted_patterns(gt)[["behaviour", "direction", "pattern"]].iloc[0].tolist()
    ['controlled_comparison', 'strong', 'advance_week > measure_height > pause:long']
    """
    if not isinstance(ground_truth, dict):
        path = Path(ground_truth)
        try:
            ground_truth = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise DataFileError(
                f"{path}: cannot read the ground truth ({type(exc).__name__}); pass the "
                "ground_truth.json written by write_greenhouse.") from None
    try:
        behaviours = ground_truth["behaviours"]
        rows = []
        for b in behaviours:
            forms = [("key", b["key_pattern"])]
            if variants:
                forms += [("variant", v) for v in b["variants"]]
            for role, tokens in forms:
                key = role == "key"
                rows.append({
                    "behaviour": b["name"], "kind": b["kind"], "direction": b["direction"],
                    "role": role, "pattern": PATTERN_SEPARATOR.join(tokens),
                    "length": len(tokens),
                    "share_strong": (b["planted"]["strong"]["share_with_key_pattern"]
                                     if key else None),
                    "share_weak": (b["planted"]["weak"]["share_with_key_pattern"]
                                   if key else None),
                })
    except (KeyError, TypeError):
        raise DataFileError(
            "The ground truth lacks 'behaviours' with 'name', 'kind', 'direction', "
            "'key_pattern', 'variants' and 'planted'; pass the ground_truth.json written "
            "by write_greenhouse.") from None
    out = pd.DataFrame(rows, columns=["behaviour", "kind", "direction", "role", "pattern",
                                      "length", "share_strong", "share_weak"])
    return out.astype({"share_strong": float, "share_weak": float})


# ---------------------------------------------------------------------------------
# private helpers


def _iso_times(times):
    """ISO 8601 text with zone ``Z`` of a datetime64[s, UTC] column."""
    raw = times.dt.tz_convert("UTC").dt.tz_localize(None).to_numpy().astype("datetime64[s]")
    return np.char.add(np.datetime_as_string(raw, unit="s"), "Z")


def _write_events(events, path, fmt, chunk=200_000):
    """Write events with times as ISO 8601 text, in chunks to bound memory."""
    if fmt == "parquet":
        try:
            import pyarrow as pa
            import pyarrow.parquet as pq
        except ImportError:
            raise ParameterError(
                "Writing Parquet needs pyarrow; install it (pip install 'seqmine[parquet]') "
                "or use events_format='csv'.") from None
        writer = None
        try:
            for i in range(0, max(len(events), 1), chunk):
                part = events.iloc[i:i + chunk]
                part = part.assign(time=_iso_times(part["time"]).astype(object))
                table = pa.Table.from_pandas(part, preserve_index=False)
                if writer is None:
                    writer = pq.ParquetWriter(path, table.schema)
                writer.write_table(table)
        finally:
            if writer is not None:
                writer.close()
        return
    with open(path, "w", encoding="utf-8", newline="") as fh:
        for i in range(0, max(len(events), 1), chunk):
            part = events.iloc[i:i + chunk]
            part = part.assign(time=_iso_times(part["time"]).astype(object))
            if fmt == "csv":
                part.to_csv(fh, index=False, header=(i == 0), lineterminator="\n")
            else:
                text = part.to_json(orient="records", lines=True, force_ascii=True)
                fh.write(text if text.endswith("\n") or not text else text + "\n")


def _check_range(value):
    ok = (isinstance(value, (tuple, list)) and len(value) == 2
          and all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in value))
    if ok:
        lo, hi = int(value[0]), int(value[1])
        ok = 8 <= lo <= hi
    if not ok:
        raise ParameterError(
            "The 'events_per_learner' parameter of generate_greenhouse must be a pair of "
            f"ints (low, high) with 8 <= low <= high. Got {value!r} instead.")
    return lo, hi


def _check_start(start):
    ts = None
    if isinstance(start, str):
        try:
            ts = pd.Timestamp(start)
        except (TypeError, ValueError):
            ts = None
    if ts is None or pd.isna(ts):
        raise ParameterError(
            "The 'start' parameter of generate_greenhouse must be an ISO 8601 time such as "
            f"'2026-03-02T09:00:00Z'. Got {start!r} instead.")
    if ts.tzinfo is not None:
        ts = ts.tz_convert("UTC").tz_localize(None)
    return np.datetime64(ts.floor("s").to_datetime64(), "s")


def _draw_episodes(rng, tendency, n_events, p):
    """Episodes of every learner, in random order within the learner."""
    n = len(tendency)
    n_types = len(_BEHAVIOUR_ORDER)
    tz = np.clip(tendency, -p["tendency_clip"], p["tendency_clip"])
    base = np.array([p["rate_base_per_100_events"][b] for b in _BEHAVIOUR_ORDER])
    slope = np.array([p["rate_tendency_slope"][b] for b in _BEHAVIOUR_ORDER])
    lam = base[None, :] * np.exp(slope[None, :] * tz[:, None]) * (n_events[:, None] / 100.0)
    counts = rng.poisson(lam)                                    # (n, n_types)
    # planted episodes, capped at max_planted_share of each learner's events
    learner = np.repeat(np.repeat(np.arange(n), n_types), counts.ravel())
    typ = np.repeat(np.tile(np.arange(n_types), n), counts.ravel())
    m = len(typ)
    lo, hi = p["decorating_run_length"]
    run = rng.integers(lo, hi + 1, size=m)
    length = np.where(typ == 2, run, np.array([3, 5, 0, 2])[typ])
    order = np.lexsort((rng.random(m), learner))
    learner, typ, length = learner[order], typ[order], length[order]
    cap = np.floor(p["max_planted_share"] * n_events).astype(np.int64)
    keep = _within_cumsum(length, learner, n) <= cap[learner]
    learner, typ, length = learner[keep], typ[keep], length[keep]
    planted = np.bincount(learner, weights=length, minlength=n).astype(np.int64)
    kept = np.zeros((n, n_types), dtype=np.int64)
    np.add.at(kept, (learner, typ), 1)
    # single filler actions make up the rest; shuffle episodes within each learner
    f_learner = np.repeat(np.arange(n), n_events - planted)
    learner = np.concatenate([learner, f_learner])
    typ = np.concatenate([typ, np.full(len(f_learner), _FILLER)])
    length = np.concatenate([length, np.ones(len(f_learner), dtype=length.dtype)])
    m = len(typ)
    order = np.lexsort((rng.random(m), learner))
    return {
        "learner": learner[order], "type": typ[order], "length": length[order],
        "counts": kept,
        "setting": _draw_choice(rng, p["controlled_comparison_setting_probs"], _SETTINGS, m),
        "measure": _draw_choice(rng, p["controlled_comparison_measure_probs"], _MEASURES, m),
        "pot": rng.integers(0, 3, size=m).astype(np.int8),       # pot1..pot3 -> 0..2
    }


def _expand_events(rng, ep, p):
    """Action, target and pause context of every event, in episode order."""
    length = ep["length"]
    N = int(length.sum())
    ev_ep = np.repeat(np.arange(len(length)), length)
    pos = np.arange(N) - (np.cumsum(length) - length)[ev_ep]
    typ = ep["type"][ev_ep]
    pot = ep["pot"][ev_ep]
    action = np.empty(N, dtype=np.int8)
    target = np.empty(N, dtype=np.int8)
    gap_cls = np.full(N, -1, dtype=np.int8)
    # controlled comparison: set_* S advance_week S measure_* L
    sel = typ == 0
    k = int(sel.sum())
    acts = np.stack([ep["setting"][ev_ep[sel]], np.full(k, _A["advance_week"]),
                     ep["measure"][ev_ep[sel]]])
    action[sel] = acts[pos[sel], np.arange(k)]
    target[sel] = np.where(pos[sel] == 1, _T["all"], pot[sel])
    gap_cls[sel] = np.where(pos[sel] == 2, _LONG, _SHORT)
    # settings burst: set_light S set_water S set_temperature S advance_week S reset M
    sel = typ == 1
    action[sel] = np.array([_A[a] for a in _BURST], dtype=np.int8)[pos[sel]]
    target[sel] = np.where(pos[sel] >= 3, _T["all"], pot[sel])
    gap_cls[sel] = np.where(pos[sel] == 4, _MEDIUM, _SHORT)
    # decorating: paint_pot S ... paint_pot M
    sel = typ == 2
    action[sel] = _A["paint_pot"]
    target[sel] = pot[sel]
    gap_cls[sel] = np.where(pos[sel] == length[ev_ep[sel]] - 1, _MEDIUM, _SHORT)
    # look it up: open_guide S open_chart M
    sel = typ == 3
    k = int(sel.sum())
    topic = rng.choice(np.array([_T["light"], _T["water"], _T["temperature"], _T["growth"]],
                                dtype=np.int8), size=k)
    chart = np.where(rng.random(k) < 0.5, _T["height"], _T["leaves"]).astype(np.int8)
    action[sel] = np.where(pos[sel] == 0, _A["open_guide"], _A["open_chart"])
    target[sel] = np.where(pos[sel] == 0, topic, chart)
    gap_cls[sel] = np.where(pos[sel] == 0, _SHORT, _MEDIUM)
    # fillers
    sel = typ == _FILLER
    k = int(sel.sum())
    fa = _draw_choice(rng, p["filler_action_probs"], tuple(p["filler_action_probs"]), k)
    action[sel] = fa
    chart = np.where(rng.random(k) < 0.5, _T["height"], _T["leaves"]).astype(np.int8)
    target[sel] = np.where(fa == _A["open_chart"], chart, pot[sel])
    gap_cls[sel] = _deal_filler_pauses(rng, gap_cls, sel, p["pause_context_share"])
    return {"episode": ev_ep, "pos": pos, "action": action, "target": target,
            "gap_cls": gap_cls}


def _draw_pauses(rng, gap_cls, p):
    """Whole seconds (at least 1) after each event, lognormal per pause context."""
    med = np.array([p["pause_lognormal"][c][0] for c in _PAUSE_LABELS])
    sd = np.array([p["pause_lognormal"][c][1] for c in _PAUSE_LABELS])
    gap = np.exp(np.log(med[gap_cls]) + sd[gap_cls] * rng.standard_normal(len(gap_cls)))
    return np.maximum(1, np.rint(gap)).astype(np.int64)


def _learner_starts(rng, n, p):
    """Seconds from ``start`` at which each learner's session begins."""
    klass = rng.permutation(n) // p["class_size"]
    periods = np.array(p["class_start_offsets_hours"]) * 3600.0
    day = klass // len(periods)
    day_offset = (day // 5) * 7 + day % 5                        # skip two days in seven
    start = (day_offset * 86400 + periods[klass % len(periods)]).astype(np.int64)
    return start + rng.integers(0, p["learner_start_jitter_seconds"] + 1, size=n)


def _draw_scores(rng, tendency, n_events, counts, p):
    """Integer pre and post scores; post depends on the planted episode rates."""
    maximum = int(p["score_max"])
    pre_p = 1.0 / (1.0 + np.exp(-(p["pre_intercept"] + p["pre_slope"] * tendency)))
    pre = rng.binomial(maximum, pre_p)
    n_top = int(np.floor(p["pre_at_max_share"] * len(tendency) + 0.5))
    if n_top:
        pre[np.argsort(-tendency, kind="stable")[:n_top]] = maximum
    rates = counts / (n_events[:, None] / 100.0)
    coef = np.array([p["gain_coefficients"][b] for b in _BEHAVIOUR_ORDER])
    gain = p["gain_intercept"] + rates @ coef + p["gain_noise_sd"] * rng.standard_normal(
        len(tendency))
    gain = np.maximum(gain, p["gain_floor"])
    post = np.clip(pre + np.rint(gain * (maximum - pre)), 0, maximum).astype(np.int64)
    return pre.astype(np.int64), post


def _split_sessions(rng, ev, ev_learner, n_events, p):
    """Session index (0 or 1) of every event; the split falls between episodes."""
    n = len(n_events)
    two = rng.random(n) < p["second_session_share"]
    # position of each event within its learner (events are grouped by learner)
    first = np.cumsum(n_events) - n_events
    in_learner = np.arange(len(ev_learner)) - first[ev_learner]
    cand = (ev["pos"] == 0) & (in_learner >= n_events[ev_learner] // 2) & two[ev_learner]
    split = np.full(n, np.iinfo(np.int64).max)
    np.minimum.at(split, ev_learner[cand], in_learner[cand])
    return (in_learner >= split[ev_learner]).astype(np.int8)


def _within_cumsum(values, group, n_groups):
    """Inclusive cumulative sum of ``values`` restarting at each group (rows sorted by group)."""
    total = np.cumsum(values, dtype=np.int64)
    starts = np.cumsum(np.bincount(group, minlength=n_groups)) - np.bincount(
        group, minlength=n_groups)
    before = np.where(starts > 0, total[np.maximum(starts - 1, 0)] if len(total) else 0, 0)
    return total - before[group]


def _draw_choice(rng, probs, names, size):
    """Action codes drawn with the given probabilities (dict name -> prob)."""
    codes = np.array([_A[a] for a in names], dtype=np.int8)
    w = np.array([probs[a] for a in names], dtype=float)
    return codes[np.searchsorted(np.cumsum(w) / w.sum(), rng.random(size), side="right")]


def _deal_filler_pauses(rng, gap_cls, filler, share):
    """Pause contexts of fillers so each context makes up about ``share`` of all gaps."""
    n_total = len(gap_cls)
    planted = np.bincount(gap_cls[~filler], minlength=3)
    n_fill = int(filler.sum())
    want_s = int(round(share["short"] * n_total)) - int(planted[_SHORT])
    want_l = int(round(share["long"] * n_total)) - int(planted[_LONG])
    n_s = min(max(want_s, 0), n_fill)
    n_l = min(max(want_l, 0), n_fill - n_s)
    labels = np.full(n_fill, _MEDIUM, dtype=np.int8)
    labels[:n_s] = _SHORT
    labels[n_s:n_s + n_l] = _LONG
    return rng.permutation(labels)


def _patterns():
    """Token patterns of each behaviour after default encoding (short pauses implicit)."""
    cc = [[s, "advance_week", mm, "pause:long"] for s in _SETTINGS for mm in _MEASURES]
    return {
        "controlled_comparison": {
            "key_pattern": ["advance_week", "measure_height", "pause:long"],
            "variants": cc,
        },
        "settings_burst": {
            "key_pattern": ["set_temperature", "advance_week", "reset"],
            "variants": [list(_BURST) + ["pause:medium"]],
        },
        "decorating": {
            "key_pattern": ["paint_pot", "paint_pot", "paint_pot"],
            "variants": [["paint_pot"] * r + ["pause:medium"] for r in range(3, 7)],
        },
        "look_it_up": {
            "key_pattern": ["open_guide", "open_chart"],
            "variants": [["open_guide", "open_chart", "pause:medium"]],
        },
    }


_DESCRIPTIONS = {
    "controlled_comparison": "change one setting, advance a week, measure, then a long "
                             "pause (thinking)",
    "settings_burst": "set light, water and temperature in quick succession, advance a "
                      "week, reset quickly",
    "decorating": "paint pots three to six times in quick succession",
    "look_it_up": "open the guide, then the chart (equally likely whatever the tendency)",
}


def _r(x):
    return None if x is None or not np.isfinite(x) else round(float(x), 6)


def _ground_truth(*, n, seed, lo, hi, start, sessions, learners, ep, gap_cls, gap, ev_learner,
                  n_pre_max):
    p = _PARAMS
    ep_learner, ep_type, measure = ep["learner"], ep["type"], ep["measure"]
    N = len(gap)
    # gaps between consecutive events of the same learner (the last event has none)
    same = ev_learner[1:] == ev_learner[:-1]
    within, within_cls = gap[:-1][same], gap_cls[:-1][same]
    gain = learners["gain"].to_numpy()
    valid = np.isfinite(gain)
    med = float(np.median(gain[valid]))
    strong = valid & (gain > med)
    weak = valid & (gain <= med)
    n_ev = learners["n_events"].to_numpy()
    pats = _patterns()
    # learners with at least one planted episode that produces the key pattern
    key_ok = np.ones(len(ep_type), dtype=bool)
    key_ok &= ~((ep_type == 0) & (measure != _A["measure_height"]))
    behaviours = []
    for j, b in enumerate(_BEHAVIOUR_ORDER):
        cnt = learners[f"n_{b}"].to_numpy()
        rate = cnt / (n_ev / 100.0)
        sel = (ep_type == j) & key_ok
        has_key = np.bincount(ep_learner[sel], minlength=n) > 0
        groups = {"all": np.ones(n, dtype=bool), "strong": strong, "weak": weak}
        kind, direction = BEHAVIOURS[b]
        behaviours.append({
            "name": b,
            "kind": kind,
            "direction": direction,
            "description": _DESCRIPTIONS[b],
            "key_pattern": pats[b]["key_pattern"],
            "variants": pats[b]["variants"],
            "rate_model": {
                "base_per_100_events": p["rate_base_per_100_events"][b],
                "tendency_slope": p["rate_tendency_slope"][b],
                # E[base * exp(slope * Z)] for Z ~ N(0, 1), ignoring clip and cap
                "expected_per_100_events": _r(p["rate_base_per_100_events"][b]
                                              * np.exp(p["rate_tendency_slope"][b] ** 2 / 2)),
            },
            "gain_coefficient": p["gain_coefficients"][b],
            "planted": {
                g: {
                    "learners": int(mask.sum()),
                    "episodes_per_100_events": _r(rate[mask].mean()) if mask.any() else None,
                    "share_with_episode": _r((cnt[mask] > 0).mean()) if mask.any() else None,
                    "share_with_key_pattern": _r(has_key[mask].mean()) if mask.any() else None,
                }
                for g, mask in groups.items()
            },
        })
    edges = np.quantile(within.astype(float), [1 / 3, 2 / 3])
    return {
        "about": "Synthetic data invented for the seqmine demo (virtual greenhouse); "
                 "no real learners. Effects are planted by the generator.",
        "format_version": FORMAT_VERSION,
        "generator": {
            "function": "seqmine.demo_data.generate_greenhouse",
            "n_learners": n,
            "seed": seed,
            "events_per_learner": [lo, hi],
            "start": start,
            "sessions": sessions,
            "parameters": copy.deepcopy(p),
        },
        "encoding_assumed": {
            "template": "{action}",
            "collapse_repeats": False,
            "pause_strategy": "quantile",
            "pause_bins": 3,
            "pause_labels": list(_PAUSE_LABELS),
            "implicit_pauses": ["short"],
        },
        "matching": {
            "max_gap": 0,
            "max_window": None,
            "skip_pauses": False,
            "note": "planted patterns are contiguous token runs under the assumed "
                    "encoding; as gapped subsequences (max_gap=None) the productive one "
                    "occurs in almost every learner, so its presence no longer differs",
        },
        "pause_edges_seconds": [_r(e) for e in edges],
        "pause_context_counts": {lab: int((within_cls == i).sum())
                                 for i, lab in enumerate(_PAUSE_LABELS)},
        "grouping": {
            "rule": "median split of normalized gain (post - pre) / (max - pre): strong "
                    "above the median, weak at or below; pre == max left out",
            "median_gain": _r(med),
            "strong": int(strong.sum()),
            "weak": int(weak.sum()),
            "no_group_pre_equals_max": int((~valid).sum()),
        },
        "counts": {"learners": n, "events": int(N), "pre_equals_max": n_pre_max},
        "behaviours": behaviours,
    }
