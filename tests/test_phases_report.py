"""Phase models in the output folder and the report: files, diagrams, warnings."""

import json
import shutil
import warnings

import numpy as np
import pytest
from report_fixture import write_output_folder

from seqmine.cli.main import main
from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import SeqmineWarning
from seqmine.phases import fit_phases
from seqmine.reporting.render import render_report


def _phase_section(html):
    start = html.index('id="phases"')
    return html[start:html.index("</section>", start)]


@pytest.mark.slow
def test_demo_report_draws_the_phase_models(tmp_path, capsys):
    # regression: phases.json listed "model_pooled.json" and the report added ".json"
    # again, so `seqmine demo` printed "Not produced in this run" instead of diagrams
    out = tmp_path / "demo"
    assert main(["demo", "--out", str(out), "--quiet"]) == 0
    capsys.readouterr()
    phases = json.loads((out / "phases" / "phases.json").read_text(encoding="utf-8"))
    assert set(phases["models"]) == {"pooled", "strong", "weak"}
    for name in phases["models"].values():
        assert name.endswith(".json") and (out / "phases" / name).is_file()
        model = json.loads((out / "phases" / name).read_text(encoding="utf-8"))
        assert model["version"] == 2 and len(set(model["state_names"])) == phases["n_states"]
    section = _phase_section((out / "report.html").read_text(encoding="utf-8"))
    assert "Not produced" not in section
    for name in ("pooled", "strong", "weak"):
        assert f'aria-label="Phase model: {name}"' in section
    # the stage's warnings are in summary.json and in the report's phase section
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    codes = {w["code"] for w in summary["warnings"]}
    for w in phases["warnings"]:
        assert w["code"] in codes
        assert w["message"].split("(")[0].strip() in section


def _iid_db(seed=3):
    # tokens drawn independently of each other: nothing for phases to find
    rng = np.random.default_rng(seed)
    tokens = ["set_light", "advance_week", "measure_height", "paint_pot", "pause:long"]
    seqs = [list(rng.choice(tokens, size=int(rng.integers(30, 60)), p=[.3, .25, .2, .15, .1]))
            for _ in range(40)]
    return SequenceDB.from_lists(seqs, groups=["strong", "weak"] * 20,
                                 pause_tokens=["pause:long"])


def test_models_near_token_frequencies_are_flagged_in_result_files_and_report(tmp_path):
    # regression: a pooled model 9 log-likelihood units better than token frequencies
    # alone (on about 90,000) was reported without a word
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = fit_phases(_iid_db(), n_states=2, n_permutations=0)
    codes = [w.message.code for w in caught if isinstance(w.message, SeqmineWarning)]
    assert "phase_model_near_frequencies" in codes
    assert [n["code"] for n in res.notes] == codes
    summary = res.summary()
    assert summary["warnings"] == res.notes
    assert all(0 <= g < 0.05 for g in summary["gain_per_token"].values())
    # into a complete output folder, in place of the invented phases
    folder = write_output_folder(tmp_path / "out")
    shutil.rmtree(folder / "phases")
    res.save(folder / "phases")
    report = render_report(folder)
    section = _phase_section(report.read_text(encoding="utf-8"))
    assert "barely beat a model of token frequencies" in section
    assert 'aria-label="Phase model: pooled"' in section


def test_top_of_range_is_said_in_the_report(tmp_path):
    folder = write_output_folder(tmp_path / "out")
    path = folder / "phases" / "phases.json"
    data = json.loads(path.read_text(encoding="utf-8"))
    data["n_states_at_top_of_range"] = True
    path.write_text(json.dumps(data), encoding="utf-8")
    section = _phase_section(render_report(folder).read_text(encoding="utf-8"))
    assert "largest tried" in section and "wider range" in section


def test_heldout_learners_explained_better_than_training_learners_is_flagged():
    # regression: held-out log-likelihood above the in-sample one (a sign of a model
    # that learnt little) went unreported. The rule compares gains over the training
    # learners' token frequencies per token, at the chosen count.
    import pandas as pd

    from seqmine.phases import PhaseModel
    from seqmine.phases.run import _checks

    model = PhaseModel.from_parameters([0.5, 0.5], [[0.9, 0.1], [0.1, 0.9]],
                                       [[0.8, 0.2], [0.2, 0.8]])
    model.log_likelihood = -50.0
    models = {"pooled": model}
    freq = {"pooled": -80.0}
    table = pd.DataFrame({"n_states": [1, 2], "heldout_gain_per_token": [0.0, 0.21],
                          "train_gain_per_token": [0.0, 0.20]})
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        notes = _checks(models, freq, table, 2, [1, 2])
    # 2 of 1-2 is also the top of the range
    assert [n["code"] for n in notes] == ["phase_heldout_above_training",
                                          "phase_states_at_top_of_range"]
    assert [w.message.code for w in caught] == [n["code"] for n in notes]
    assert "0.2100 against 0.2000" in notes[0]["message"]
    assert "all_splits" in notes[0]["message"]
    # the other way round: no warning about held-out learners
    table["heldout_gain_per_token"] = [0.0, 0.19]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        notes = _checks(models, freq, table, 2, [1, 2])
    assert "phase_heldout_above_training" not in {n["code"] for n in notes}
    assert {w.message.code for w in caught} == {n["code"] for n in notes}
