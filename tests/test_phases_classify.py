"""GroupHMMClassifier: log-likelihood-ratio classification between group phase models."""

import numpy as np
import pytest
from sklearn.base import clone
from sklearn.model_selection import cross_val_score

from seqmine.encoding.sequences import SequenceDB
from seqmine.errors import NotFittedError, ParameterError
from seqmine.phases import GroupHMMClassifier, PhaseModel

VOCAB = ["set_light", "set_water", "advance_week", "measure_height", "paint_pot", "reset"]


def _generators():
    B = np.full((3, 6), 0.025)
    B[0, [0, 1]] = 0.45
    B[1, [2, 3]] = 0.45
    B[2, [4, 5]] = 0.45
    A = np.array([[0.70, 0.27, 0.03], [0.03, 0.70, 0.27], [0.27, 0.03, 0.70]])
    pi = np.full(3, 1 / 3)
    return (PhaseModel.from_parameters(pi, A, B, VOCAB),
            PhaseModel.from_parameters(pi, A.T.copy(), B, VOCAB))


def _db(n=30, length=50, seed=7):
    seqs = []
    for k, gen in enumerate(_generators()):
        X, _ = gen.sample([length] * n, random_state=seed + k)
        seqs += [[VOCAB[t] for t in X[i * length:(i + 1) * length]] for i in range(n)]
    return SequenceDB.from_lists(seqs, groups=["strong"] * n + ["weak"] * n, vocab=VOCAB)


@pytest.fixture(scope="module")
def fitted():
    train = _db(seed=7)
    return GroupHMMClassifier(n_states=3, n_restarts=5, random_state=0).fit(train)


def _oracle_accuracy(db):
    """Accuracy of the likelihood ratio of the true generators (the best possible)."""
    gs, gw = _generators()
    return ((gw.score_tokens(db) > gs.score_tokens(db)).astype(int) == db.groups).mean()


def test_fit_contract_and_probabilities(fitted):
    test = _db(seed=21)
    assert fitted.classes_.tolist() == ["strong", "weak"]
    assert [m.label for m in fitted.models_] == ["strong", "weak"]
    proba = fitted.predict_proba(test)
    assert proba.shape == (test.n_sequences, 2)
    np.testing.assert_allclose(proba.sum(axis=1), 1.0)
    # decision function = log-likelihood ratio + log prior ratio (equal priors here)
    llr = fitted.models_[1].score_tokens(test) - fitted.models_[0].score_tokens(test)
    np.testing.assert_allclose(fitted.decision_function(test), llr, rtol=1e-12)
    pred = fitted.predict(test)
    assert np.array_equal(pred == "weak", fitted.decision_function(test) > 0)
    truth = np.array(test.group_names)[test.groups]
    # within 0.05 of the classifier that knows the generators (0.98 on this sample)
    assert (pred == truth).mean() >= _oracle_accuracy(test) - 0.05


def test_partial_sequences(fitted):
    test = _db(seed=21)
    acc_full = (fitted.predict(test) == np.array(test.group_names)[test.groups]).mean()
    part = test.cut(0.2)
    acc_part = (fitted.predict(part) == np.array(part.group_names)[part.groups]).mean()
    assert _oracle_accuracy(part) - 0.1 <= acc_part <= acc_full
    empty = [np.zeros(0, dtype=np.int64)]
    # an empty sequence gets the prior (training groups are balanced)
    np.testing.assert_allclose(fitted.predict_proba(empty), [[0.5, 0.5]])


def test_list_input_and_sklearn_tools():
    db = _db(n=20, length=50)
    X = [db.sequence(i) for i in range(db.n_sequences)]
    y = np.array(db.group_names)[db.groups]
    clf = GroupHMMClassifier(n_states=3, n_restarts=4, random_state=1, prior="uniform")
    assert clone(clf).get_params() == clf.get_params()
    scores = cross_val_score(clf, X, y, cv=2)
    assert scores.mean() > 0.7
    clf.fit(X, y)
    np.testing.assert_allclose(clf.log_prior_, np.log([0.5, 0.5]))
    assert clf.vocab_ == [str(j) for j in range(6)]


def test_classifier_errors():
    db = _db(n=4, length=10)
    with pytest.raises(NotFittedError, match="not fitted yet"):
        GroupHMMClassifier().predict(db)
    one = db.subset(np.flatnonzero(db.groups == 0))
    with pytest.raises(ParameterError, match="needs sequences of at least 2 groups"):
        GroupHMMClassifier(n_states=1, n_restarts=1).fit(one)
    with pytest.raises(ParameterError, match="needs y when X is a list"):
        GroupHMMClassifier().fit([[0, 1]])
    with pytest.raises(ParameterError, match="'prior' parameter of GroupHMMClassifier"):
        GroupHMMClassifier(prior="flat").fit(db)
    clf = GroupHMMClassifier(n_states=1, n_restarts=1).fit(db)
    with pytest.raises(ParameterError, match=r"Token ids must lie in 0\.\.5; got 0\.\.9"):
        clf.predict([[0, 9]])
    other = SequenceDB.from_lists([["x", "y"]])
    with pytest.raises(ParameterError, match="vocabulary differs"):
        clf.predict(other)


def test_state_count_chosen_per_group_by_bic():
    db = _db(n=15, length=40)
    clf = GroupHMMClassifier(n_states="1-3", n_restarts=2, random_state=0).fit(db)
    assert clf.n_states_ == [m.n_states for m in clf.models_]
    for k, m in enumerate(clf.models_):
        # the chosen model has the lowest BIC of the counts tried on its group's data
        sub = db.subset(np.flatnonzero(db.groups == k))
        bics = []
        for n in (1, 2, 3):
            single = GroupHMMClassifier(n_states=n, n_restarts=2, random_state=0).fit(db).models_[k]
            bics.append(single.bic(sub))
        assert m.n_states == 1 + int(np.argmin(bics))
