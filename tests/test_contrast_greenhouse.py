"""End-to-end check on the shipped greenhouse demo data: planted behaviours come out right.

Needs the loading/encoding stages and the demo data set; skipped where they are absent.
"""

import json
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

from seqmine.encoding.encoder import Encoder
from seqmine.inputs.load import load_events
from seqmine.inputs.outcomes import load_outcomes
from seqmine.mining.patterns import PatternSet
from seqmine.pipeline import prepare_sequences
from seqmine.scoring.contrast import contrast
from seqmine.scoring.transitions import transitions

DATA = Path(__file__).resolve().parents[1] / "datasets" / "greenhouse"
pytestmark = pytest.mark.skipif(not (DATA / "ground_truth.json").is_file(),
                                reason="greenhouse demo data set not present")


def _contiguous_counts(db, pattern_ids):
    """Brute-force non-overlapping contiguous occurrences (max_gap = 0) per sequence."""
    out = np.zeros((db.n_sequences, len(pattern_ids)), dtype=np.int64)
    for i in range(db.n_sequences):
        seq = db.sequence(i).tolist()
        for j, pat in enumerate(pattern_ids):
            k, pos = len(pat), 0
            while pos + k <= len(seq):
                if tuple(seq[pos: pos + k]) == pat:
                    out[i, j] += 1
                    pos += k
                else:
                    pos += 1
    return out


@pytest.fixture(scope="module")
def greenhouse():

    truth = json.loads((DATA / "ground_truth.json").read_text(encoding="utf-8"))
    prepared = prepare_sequences(load_events(DATA / "events.csv"),
                                          load_outcomes(DATA / "outcomes.csv"),
                                          encoder=Encoder())
    db = prepared.db
    behaviours = truth["behaviours"]
    ids = [tuple(db.vocab.index(t) for t in b["key_pattern"]) for b in behaviours]
    counts = _contiguous_counts(db, ids)
    sup = np.stack([(counts[db.groups == g] > 0).sum(axis=0) for g in range(db.n_groups)], 1)
    ps = PatternSet(patterns=ids, vocab=db.vocab, is_pause=db.is_pause,
                    group_names=db.group_names, group_sizes=db.group_sizes(),
                    support_counts=sup, counts=sp.csr_matrix(counts), seq_groups=db.groups,
                    constraints={"max_gap": 0})
    return db, ps, behaviours


@pytest.mark.slow
@pytest.mark.parametrize("correction", ["bh", "westfall-young"])
def test_planted_behaviours_come_out_in_the_right_direction(greenhouse, correction):
    db, ps, behaviours = greenhouse
    table = contrast(ps, db, correction=correction, n_permutations=499, random_state=1,
                     n_bootstrap=50).set_index("pattern")
    for b in behaviours:
        row = table.loc[" > ".join(b["key_pattern"])]
        expected = "" if b["direction"] == "neutral" else b["direction"]
        assert row["favours"] == expected, (b["name"], row.to_dict())
        if expected:
            assert row["stability"] > 0.5
        else:
            assert row["q_value"] > 0.05


@pytest.mark.slow
def test_transitions_on_greenhouse(greenhouse):
    db, _, _ = greenhouse
    t = transitions(db)
    strong = t[(t.group == "strong") & (t["from"] == "advance_week")].set_index("to")
    # a planted run: advance_week is followed by a measurement more than by chance
    assert strong.loc["measure_height", "adjusted_residual"] > 1.96
    assert t.groupby("group")["count"].sum().to_dict() == {
        g: int(n) for g, n in zip(db.group_names,
                                  [(db.lengths[db.groups == k] - 1).clip(0).sum()
                                   for k in range(db.n_groups)])}
