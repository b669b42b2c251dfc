"""Brute-force offline reference for the watcher tests (independent of seqmine.detection.watcher).

``reference_tokens`` follows the token-stream rule written in seqmine/encode.py's
module docstring step by step with plain loops; ``brute_instance_count`` enumerates
every index tuple of a sequence (itertools.combinations), keeps those meeting the
gap/window definitions of seqmine/patterns.py, and applies the earliest-end greedy
scan described there.
"""

from __future__ import annotations

import itertools
from bisect import bisect_right

PAUSE = "pause:"


def reference_tokens(events, encoding, *, reject_duplicates=True):
    """learner -> list of sequences; a sequence is a list of (token, time)."""
    seen = set()
    kept = []
    for k, e in enumerate(events):
        key = (e["learner"], float(e["time"]), e["action"], e.get("session", ""),
               e.get("target", ""), e.get("channel", ""))
        if reject_duplicates and key in seen:
            continue
        seen.add(key)
        kept.append((e["learner"], float(e["time"]), k, e))
    kept.sort(key=lambda r: (r[0], r[1], r[2]))  # learner, time, file order
    mapping = encoding.get("mapping") or {}
    template = encoding.get("template", "{action}")
    collapse = encoding.get("collapse_repeats", False)
    unit = encoding.get("unit", "learner")
    sgap = encoding.get("session_gap")
    pause = encoding.get("pause") or {}
    edges = pause.get("edges", [])
    labels = pause.get("labels", [])
    implicit = set(pause.get("implicit", []))
    use_pauses = pause.get("strategy", "none") != "none" and labels
    out = {}
    # step 2: mapping first; dropped events vanish
    mapped = []
    for learner, t, _k, e in kept:
        a = mapping.get(e["action"], e["action"])
        if a == "":
            continue
        fields = {"action": a, "target": e.get("target", ""), "channel": e.get("channel", ""),
                  "session": e.get("session", "")}
        mapped.append((learner, t, template.format(**fields), e.get("session", "")))
    # steps 3-6: sequences, collapse, pauses
    prev = None  # (learner, time_of_run_end, symbol, session, token_time)
    for learner, t, sym, sess in mapped:
        new_seq = prev is None or prev[0] != learner
        if not new_seq and unit == "session":
            new_seq = sess != prev[3] or (sgap is not None and t - prev[1] > sgap)
        if new_seq:
            seqs = out.setdefault(learner, [])
            seqs.append([(sym, t)])
            prev = (learner, t, sym, sess, t)
            continue
        seq = out[learner][-1]
        if collapse and sym == prev[2]:
            prev = (learner, t, sym, sess, prev[4])
            continue
        if use_pauses:
            lab = labels[bisect_right(edges, t - prev[1])]
            if lab not in implicit:
                seq.append((PAUSE + lab, prev[4]))
        seq.append((sym, t))
        prev = (learner, t, sym, sess, t)
    return out


def occurrences(seq, pattern, max_gap=None, max_window=None, skip_pauses=False):
    """All (start, end) spans of occurrences of ``pattern`` in ``seq`` (token names)."""
    k = len(pattern)
    counted = [not (skip_pauses and tok.startswith(PAUSE)) for tok in seq]
    spans = set()
    for idx in itertools.combinations(range(len(seq)), k):
        if any(seq[i] != p for i, p in zip(idx, pattern)):
            continue
        if max_gap is not None and any(
                sum(counted[a + 1:b]) > max_gap for a, b in zip(idx, idx[1:])):
            continue
        if max_window is not None and sum(counted[idx[0]:idx[-1] + 1]) > max_window:
            continue
        spans.add((idx[0], idx[-1]))
    return spans


def brute_instance_count(seq, pattern, max_gap=None, max_window=None, skip_pauses=False):
    """Earliest-end greedy count of pairwise disjoint occurrences."""
    spans = sorted(occurrences(seq, pattern, max_gap, max_window, skip_pauses),
                   key=lambda s: (s[1], -s[0]))
    last_end, n = -1, 0
    for s, e in spans:
        if s > last_end:
            n += 1
            last_end = e
    return n


def max_disjoint(spans):
    """Largest number of pairwise disjoint spans, by exhaustive search (small inputs)."""
    spans = sorted(spans)
    best = 0
    for r in range(len(spans), 0, -1):
        for combo in itertools.combinations(spans, r):
            if all(a[1] < b[0] for a, b in zip(combo, combo[1:])):
                return r
    return best
