"""Tests of the synthetic greenhouse generator and the shipped demo data set."""

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import fisher_exact

from seqmine.demo_data import (
    ACTIONS,
    BEHAVIOURS,
    GreenhouseData,
    _within_cumsum,
    generate_greenhouse,
    planted_patterns,
    write_greenhouse,
)
from seqmine.errors import DataFileError, ParameterError

SHIPPED = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"
SHIPPED_SEED = 20261202
SHIPPED_N = 300
ISO_Z = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$")


# ---------------------------------------------------------------------------------
# a tokenisation written here, independent of the generator and of seqmine.encoding.encoder:
# action symbols, global tertile pause bins (np.quantile, searchsorted side="right"),
# short pauses left implicit


def tokenise(events):
    ev = events.copy()
    t = pd.to_datetime(ev["time"], utc=True)
    ev["t"] = (t - pd.Timestamp("1970-01-01", tz="UTC")).dt.total_seconds()
    ev = ev.sort_values(["learner", "t"], kind="stable")
    per = {}
    for learner, part in ev.groupby("learner", sort=True):
        per[learner] = (part["action"].tolist(), np.diff(part["t"].to_numpy()))
    gaps = np.concatenate([g for _, g in per.values()])
    edges = np.quantile(gaps, [1 / 3, 2 / 3])
    labels = ["short", "medium", "long"]
    out = {}
    for learner, (acts, g) in per.items():
        bins = np.searchsorted(edges, g, side="right")
        toks = []
        for i, a in enumerate(acts):
            toks.append(a)
            if i < len(g) and bins[i] > 0:
                toks.append("pause:" + labels[bins[i]])
        out[learner] = toks
    return out, edges


def count_contiguous(tokens, pattern):
    k = len(pattern)
    return sum(1 for i in range(len(tokens) - k + 1) if tokens[i:i + k] == pattern)


def paint_runs(tokens, minimum=3):
    runs, cur = 0, 0
    for tok in tokens + ["<end>"]:
        if tok == "paint_pot":
            cur += 1
        else:
            runs += cur >= minimum
            cur = 0
    return runs


def median_split(outcomes):
    o = outcomes.set_index("learner")
    ok = o["pre"] < o["max"]
    g = ((o["post"] - o["pre"]) / (o["max"] - o["pre"]))[ok]
    med = g.median()
    return set(g.index[g > med]), set(g.index[g <= med])


@pytest.fixture(scope="module")
def small():
    return generate_greenhouse(300, random_state=SHIPPED_SEED)


@pytest.fixture(scope="module")
def shipped_events():
    return pd.read_csv(SHIPPED / "events.csv", dtype=str)


@pytest.fixture(scope="module")
def shipped_tokens(shipped_events):
    return tokenise(shipped_events)


# ---------------------------------------------------------------------------------
# determinism and files


def test_same_seed_same_data_other_seed_differs():
    a = generate_greenhouse(40, random_state=5)
    b = generate_greenhouse(40, random_state=5)
    c = generate_greenhouse(40, random_state=6)
    assert isinstance(a, GreenhouseData)
    pd.testing.assert_frame_equal(a.events, b.events)
    pd.testing.assert_frame_equal(a.outcomes, b.outcomes)
    assert a.ground_truth == b.ground_truth
    assert not a.events["action"].equals(c.events["action"]) or len(a.events) != len(c.events)


@pytest.mark.parametrize("fmt", ["csv", "jsonl"])
def test_written_files_byte_identical(tmp_path, fmt):
    p1 = write_greenhouse(tmp_path / "a", 25, random_state=9, events_format=fmt)
    p2 = write_greenhouse(tmp_path / "b", 25, random_state=9, events_format=fmt)
    for role in ("events", "outcomes", "ground_truth"):
        assert p1[role].read_bytes() == p2[role].read_bytes()
    assert p1["events"].name == f"events.{fmt}"


def test_jsonl_and_parquet_hold_same_events(tmp_path):
    write_greenhouse(tmp_path, 12, random_state=4, events_format="jsonl")
    write_greenhouse(tmp_path, 12, random_state=4, events_format="parquet")
    write_greenhouse(tmp_path, 12, random_state=4, events_format="csv")
    csv = pd.read_csv(tmp_path / "events.csv", dtype=str)
    jl = pd.read_json(tmp_path / "events.jsonl", lines=True, dtype=str)
    pq = pd.read_parquet(tmp_path / "events.parquet")
    for other in (jl, pq):
        assert list(other.columns) == list(csv.columns)
        for col in csv.columns:
            assert other[col].astype(str).tolist() == csv[col].tolist()


def test_shipped_files_regenerate_byte_identical(tmp_path):
    paths = write_greenhouse(tmp_path, SHIPPED_N, random_state=SHIPPED_SEED)
    for role, path in paths.items():
        shipped = SHIPPED / path.name
        assert shipped.read_bytes() == path.read_bytes(), f"{shipped} differs ({role})"
    assert (SHIPPED / "README.md").is_file()


def test_ground_truth_json_is_plain_and_sorted():
    text = (SHIPPED / "ground_truth.json").read_text(encoding="utf-8")
    gt = json.loads(text)
    assert text == json.dumps(gt, indent=2, sort_keys=True) + "\n"
    assert gt["generator"]["seed"] == SHIPPED_SEED
    assert gt["generator"]["n_learners"] == SHIPPED_N
    assert "synthetic" in gt["about"].lower()
    assert gt["matching"]["max_gap"] == 0


# ---------------------------------------------------------------------------------
# shape of the data


@pytest.mark.parametrize("rng_", [(60, 150), (20, 25), (9, 9)])
def test_event_counts_within_range(rng_):
    d = generate_greenhouse(60, random_state=2, events_per_learner=rng_)
    sizes = d.events.groupby("learner").size()
    assert len(sizes) == 60
    assert sizes.min() >= rng_[0] and sizes.max() <= rng_[1]
    assert (d.learners.set_index("learner")["n_events"] == sizes).all()


def test_columns_times_and_vocabulary(shipped_events):
    ev = shipped_events
    assert list(ev.columns) == ["learner", "time", "action", "target"]
    assert ev["time"].map(lambda s: bool(ISO_Z.match(s))).all()
    assert set(ev["action"]) == set(ACTIONS)
    assert ev.notna().all().all()
    assert ev["learner"].nunique() == SHIPPED_N


def test_events_interleaved_and_sorted_by_time(shipped_events):
    t = pd.to_datetime(shipped_events["time"], utc=True)
    assert t.is_monotonic_increasing
    switches = (shipped_events["learner"] != shipped_events["learner"].shift()).sum()
    # one block per learner would give 300 switches; a real interleaved log gives many more
    assert switches > 20 * SHIPPED_N
    # sessions start at different times (several class periods and days)
    starts = t.groupby(shipped_events["learner"]).min()
    assert starts.nunique() > SHIPPED_N / 3
    assert starts.dt.date.nunique() >= 2


def test_outcomes_valid(small):
    o = small.outcomes
    assert list(o.columns) == ["learner", "pre", "post", "max"]
    assert o["learner"].is_unique and set(o["learner"]) == set(small.events["learner"])
    for col in ("pre", "post", "max"):
        assert o[col].dtype.kind == "i"
    assert ((o["pre"] >= 0) & (o["pre"] <= o["max"])).all()
    assert ((o["post"] >= 0) & (o["post"] <= o["max"])).all()
    assert (o["max"] == 20).all()
    # pre == max is planted for round(0.5 %) of learners, counted in the ground truth
    n_full = int((o["pre"] == o["max"]).sum())
    assert n_full == small.ground_truth["counts"]["pre_equals_max"] == 2


@pytest.mark.parametrize("n", [1, 99, 4000])
def test_pre_equals_max_rare_planted_and_left_out_of_groups(n):
    d = generate_greenhouse(n, random_state=11, events_per_learner=(10, 12))
    o = d.outcomes.set_index("learner")
    full = o.index[o["pre"] == o["max"]]
    planted = int(np.floor(0.005 * n + 0.5))
    top = d.learners.sort_values("tendency", ascending=False)["learner"][:planted]
    assert set(top) <= set(full)
    # binomial pre scores reach the maximum by chance about once in 10^5 learners
    assert planted <= len(full) <= planted + max(1, 0.002 * n)
    assert (o.loc[full, "post"] == o.loc[full, "max"]).all()
    gt = d.ground_truth
    assert gt["counts"]["pre_equals_max"] == len(full)
    assert gt["grouping"]["no_group_pre_equals_max"] == len(full)
    assert gt["grouping"]["strong"] + gt["grouping"]["weak"] + len(full) == n


# ---------------------------------------------------------------------------------
# planted behaviours


def test_pause_edges_fall_between_contexts(shipped_tokens):
    _, edges = shipped_tokens
    # contexts: short ~ median 2 s, medium ~ 11 s, long ~ 60 s (see generator parameters)
    assert 4 < edges[0] <= 8
    assert 15 <= edges[1] <= 30
    gt = json.loads((SHIPPED / "ground_truth.json").read_text(encoding="utf-8"))
    assert gt["pause_edges_seconds"] == pytest.approx(list(edges))


def test_tokenised_counts_match_planted_episodes(small):
    toks, _ = tokenise(small.events)
    lt = small.learners.set_index("learner")
    gt = {b["name"]: b for b in small.ground_truth["behaviours"]}
    n_cc = sum(count_contiguous(t, v) for t in toks.values()
               for v in gt["controlled_comparison"]["variants"][:])
    n_sb = sum(count_contiguous(t, gt["settings_burst"]["key_pattern"]) for t in toks.values())
    n_look = sum(count_contiguous(t, ["open_guide", "open_chart"]) for t in toks.values())
    n_dec = sum(paint_runs(t) for t in toks.values())
    # tolerance: an occurrence is lost when it ends the session (no pause after it) or
    # when a pause falls on the wrong side of a tertile edge; a few percent at most
    planted = {k: int(lt[f"n_{k}"].sum()) for k in BEHAVIOURS}
    assert 0.95 * planted["controlled_comparison"] <= n_cc <= planted["controlled_comparison"]
    assert 0.97 * planted["settings_burst"] <= n_sb <= planted["settings_burst"]
    assert 0.97 * planted["look_it_up"] <= n_look <= planted["look_it_up"]
    # adjacent decorating episodes merge when the pause between them bins as short, and
    # a run of 6 splits in two when a short pause inside it bins as medium
    assert 0.93 * planted["decorating"] <= n_dec <= 1.03 * planted["decorating"]
    # events not in a planted episode contain none of these symbols' combinations
    assert all("reset" not in t or count_contiguous(t, ["advance_week", "reset"]) > 0
               for t in toks.values())


def test_planted_rates_as_configured():
    d = generate_greenhouse(2000, random_state=3)
    params = d.ground_truth["generator"]["parameters"]
    per100 = d.learners["n_events"].to_numpy() / 100.0
    for b in BEHAVIOURS:
        base = params["rate_base_per_100_events"][b]
        slope = params["rate_tendency_slope"][b]
        # E[base * exp(slope * Z)] = base * exp(slope^2 / 2) for Z ~ N(0, 1)
        # (lognormal mean; the tendency clip and the share cap bias it by < 1 %)
        expected = base * np.exp(slope ** 2 / 2)
        rate = d.learners[f"n_{b}"].to_numpy() / per100
        se = rate.std(ddof=1) / np.sqrt(len(rate))
        assert abs(rate.mean() - expected) < 4 * se, (b, rate.mean(), expected, se)
        gt = next(x for x in d.ground_truth["behaviours"] if x["name"] == b)
        assert gt["rate_model"]["expected_per_100_events"] == pytest.approx(expected, abs=1e-6)
        assert gt["planted"]["all"]["episodes_per_100_events"] == pytest.approx(rate.mean(),
                                                                                  abs=1e-6)
    # rates follow the tendency in the configured direction
    z = d.learners["tendency"].to_numpy()
    for b in BEHAVIOURS:
        r = np.corrcoef(z, d.learners[f"n_{b}"] / per100)[0, 1]
        slope = params["rate_tendency_slope"][b]
        if slope > 0:
            assert r > 0.3
        elif slope < 0:
            assert r < -0.3
        else:
            assert abs(r) < 0.1


def test_ground_truth_patterns_use_known_tokens():
    gt = json.loads((SHIPPED / "ground_truth.json").read_text(encoding="utf-8"))
    vocab = set(ACTIONS) | {"pause:medium", "pause:long"}
    names = [b["name"] for b in gt["behaviours"]]
    assert names == list(BEHAVIOURS)
    for b in gt["behaviours"]:
        assert b["direction"] in ("strong", "weak", "neutral")
        assert set(b["key_pattern"]) <= vocab
        assert 2 <= len(b["key_pattern"]) <= 4  # findable with a miner's max_length=4
        for v in b["variants"]:
            assert set(v) <= vocab
            assert any(v[i:i + len(b["key_pattern"])] == b["key_pattern"]
                       for i in range(len(v))) or b["name"] == "controlled_comparison"
    assert gt["counts"]["events"] == (SHIPPED / "events.csv").read_bytes().count(b"\n") - 1


@pytest.mark.slow
def test_planted_behaviours_detectable_in_shipped_data(shipped_events, shipped_tokens):
    """Fisher's exact test on presence of each contiguous key pattern, median split.

    Reference: scipy.stats.fisher_exact (two-sided). Productive and unproductive
    behaviours must come out clearly significant in their direction; the planted
    neutral one must not.
    """
    toks, _ = shipped_tokens
    outcomes = pd.read_csv(SHIPPED / "outcomes.csv")
    strong, weak = median_split(outcomes)
    assert abs(len(strong) - len(weak)) <= 0.1 * SHIPPED_N
    gt = json.loads((SHIPPED / "ground_truth.json").read_text(encoding="utf-8"))
    for b in gt["behaviours"]:
        present = {lr: count_contiguous(t, b["key_pattern"]) > 0 for lr, t in toks.items()}
        a = sum(present[lr] for lr in strong)
        c = sum(present[lr] for lr in weak)
        table = [[a, len(strong) - a], [c, len(weak) - c]]
        p = fisher_exact(table)[1]
        share_s, share_w = a / len(strong), c / len(weak)
        # the ground truth's planted shares agree with what the tokens show
        assert share_s == pytest.approx(b["planted"]["strong"]["share_with_key_pattern"],
                                        abs=0.03)
        assert share_w == pytest.approx(b["planted"]["weak"]["share_with_key_pattern"],
                                        abs=0.03)
        if b["direction"] == "strong":
            assert p < 1e-4 and share_s > share_w, (b["name"], p)
        elif b["direction"] == "weak":
            assert p < 1e-4 and share_s < share_w, (b["name"], p)
        else:
            assert p > 0.2, (b["name"], p)


# ---------------------------------------------------------------------------------
# parameter errors


@pytest.mark.parametrize("kwargs, match", [
    ({"n_learners": 0}, r"'n_learners' parameter of generate_greenhouse must be an int >= 1"),
    ({"n_learners": 2.5}, r"'n_learners'.*Got 2.5"),
    ({"random_state": -1}, r"'random_state' parameter"),
    ({"events_per_learner": (50, 40)}, r"'events_per_learner'.*8 <= low <= high"),
    ({"events_per_learner": (3, 10)}, r"'events_per_learner'.*Got \(3, 10\)"),
    ({"events_per_learner": 100}, r"'events_per_learner'.*pair of ints"),
    ({"start": "yesterday-ish"}, r"'start' parameter.*ISO 8601"),
    ({"start": 12}, r"'start' parameter.*Got 12"),
])
def test_bad_parameters(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        generate_greenhouse(**{"n_learners": 5, **kwargs})


def test_bad_events_format(tmp_path):
    with pytest.raises(ParameterError, match=r"'events_format'.*'csv', 'jsonl', 'parquet'"):
        write_greenhouse(tmp_path, 5, events_format="xlsx")


def test_start_zone_handled():
    a = generate_greenhouse(5, random_state=1, start="2026-03-02T10:00:00+01:00")
    b = generate_greenhouse(5, random_state=1, start="2026-03-02T09:00:00Z")
    c = generate_greenhouse(5, random_state=1, start="2026-03-02T09:00:00")
    pd.testing.assert_frame_equal(a.events, b.events)
    pd.testing.assert_frame_equal(b.events, c.events)


# ---------------------------------------------------------------------------------
# planted_patterns


def test_planted_patterns_table_from_file_and_dict(small):
    from_file = planted_patterns(SHIPPED / "ground_truth.json")
    from_dict = planted_patterns(small.ground_truth)
    pd.testing.assert_frame_equal(from_file, from_dict)
    assert list(from_file.columns) == ["behaviour", "kind", "direction", "role", "pattern",
                                       "length", "share_strong", "share_weak"]
    assert from_file["behaviour"].tolist() == list(BEHAVIOURS)
    assert (from_file["role"] == "key").all()
    row = from_file.set_index("behaviour").loc["settings_burst"]
    assert row["pattern"] == "set_temperature > advance_week > reset"
    assert row["length"] == 3 and row["direction"] == "weak"
    assert row["share_weak"] > row["share_strong"]
    full = planted_patterns(small.ground_truth, variants=True)
    assert (full["role"] == "variant").sum() == sum(
        len(b["variants"]) for b in small.ground_truth["behaviours"])
    assert full.loc[full["role"] == "variant", "share_strong"].isna().all()


def test_planted_patterns_bad_input(tmp_path):
    with pytest.raises(DataFileError, match=r"nope\.json: cannot read the ground truth"):
        planted_patterns(tmp_path / "nope.json")
    bad = tmp_path / "bad.json"
    bad.write_text("{not json", encoding="utf-8")
    with pytest.raises(DataFileError, match=r"bad\.json: cannot read the ground truth"):
        planted_patterns(bad)
    with pytest.raises(DataFileError, match=r"lacks 'behaviours'"):
        planted_patterns({"behaviours": [{"name": "x"}]})


# ---------------------------------------------------------------------------------
# sessions


def test_sessions_split_between_episodes_one_week_later():
    plain = generate_greenhouse(200, random_state=8)
    split = generate_greenhouse(200, random_state=8, sessions=True)
    ev = split.events
    assert list(ev.columns) == ["learner", "time", "action", "target", "session"]
    assert set(ev["session"]) == {"s1", "s2"}
    # same work, scores and planted counts; only times move and the column is added
    key = ["learner", "action", "target"]
    a = plain.events.sort_values(["learner", "time"], kind="stable")[key]
    b = ev.sort_values(["learner", "time"], kind="stable")[key]
    assert a.reset_index(drop=True).equals(b.reset_index(drop=True))
    pd.testing.assert_frame_equal(plain.outcomes, split.outcomes)
    assert plain.ground_truth["behaviours"] == split.ground_truth["behaviours"]
    assert split.ground_truth["generator"]["sessions"] is True
    assert ev["time"].is_monotonic_increasing
    per = ev.groupby(["learner", "session"])["time"].agg(["min", "max", "size"]).unstack()
    two = per["size"]["s2"].notna()
    # share of learners with a second session: 0.3 configured; 4-sigma binomial bound
    assert abs(two.mean() - 0.3) < 4 * np.sqrt(0.3 * 0.7 / 200)
    gap = per["min"]["s2"][two] - per["max"]["s1"][two]
    assert (gap >= pd.Timedelta(days=6)).all()
    n_ev = per["size"].sum(axis=1)
    assert (per["size"]["s1"][two] >= n_ev[two] // 2).all()
    nsess = split.learners.set_index("learner")["n_sessions"]
    assert (nsess[two.index[two]] == 2).all() and (nsess[two.index[~two]] == 1).all()
    # the split never cuts a planted episode (a cut would turn a short pause inside it
    # into a week-long one and lose the key pattern)
    toks_split, edges_split = tokenise(ev)
    toks_plain, edges_plain = tokenise(plain.events)
    assert list(edges_split) == list(edges_plain)
    for b in split.ground_truth["behaviours"]:
        for learner in toks_plain:
            assert count_contiguous(toks_split[learner], b["key_pattern"]) == \
                count_contiguous(toks_plain[learner], b["key_pattern"])


def test_sessions_must_be_bool():
    with pytest.raises(ParameterError, match=r"'sessions' parameter.*True or False"):
        generate_greenhouse(3, sessions="yes")


# ---------------------------------------------------------------------------------
# internals checked against pandas


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 5), st.integers(0, 50)), max_size=40))
def test_within_cumsum_matches_pandas_groupby(rows):
    rows = sorted(rows, key=lambda r: r[0])
    group = np.array([r[0] for r in rows], dtype=np.int64)
    values = np.array([r[1] for r in rows], dtype=np.int64)
    got = _within_cumsum(values, group, 6)
    # reference: pandas groupby cumulative sum
    ref = pd.Series(values).groupby(group).cumsum().to_numpy() if len(rows) else values
    assert got.tolist() == ref.tolist()


def test_pause_contexts_follow_configured_lognormals(small):
    """Gaps inside decorating runs (short context) and after a controlled comparison
    (long context) have the configured medians (2 s and 60 s) up to rounding."""
    ev = small.events.sort_values(["learner", "time"], kind="stable").reset_index(drop=True)
    t = (ev["time"] - ev["time"].iloc[0]).dt.total_seconds().to_numpy()
    same = ev["learner"].to_numpy()[1:] == ev["learner"].to_numpy()[:-1]
    gap = np.diff(t)
    act = ev["action"].to_numpy()
    paint = same & (act[:-1] == "paint_pot") & (act[1:] == "paint_pot")
    assert 1.5 <= np.median(gap[paint]) <= 2.5
    cc = np.zeros(len(gap), dtype=bool)
    cc[2:] = (same[2:] & np.isin(act[:-3], ["set_light", "set_water", "set_temperature"])
              & (act[1:-2] == "advance_week") & np.char.startswith(act[2:-1].astype(str),
                                                                   "measure_"))
    assert 50 <= np.median(gap[cc]) <= 70


def test_ground_truth_is_a_private_copy():
    a = generate_greenhouse(5, random_state=1)
    a.ground_truth["generator"]["parameters"]["score_max"] = 999
    a.ground_truth["generator"]["parameters"]["gain_coefficients"]["decorating"] = 9.0
    b = generate_greenhouse(5, random_state=1)
    assert b.ground_truth["generator"]["parameters"]["score_max"] == 20
    assert b.ground_truth["generator"]["parameters"]["gain_coefficients"]["decorating"] < 0
    assert (b.outcomes["max"] == 20).all()


def test_output_folder_that_is_a_file(tmp_path):
    blocker = tmp_path / "taken"
    blocker.write_text("x", encoding="utf-8")
    with pytest.raises(DataFileError, match=r"taken: cannot create the output folder"):
        write_greenhouse(blocker, 3)
