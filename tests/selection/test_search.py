"""Search and ranking rules (the one-standard-error rule, budgets, failures)."""

import time

import numpy as np
import pytest
from scipy import stats
from service.core.cvresult import CVResult, Metrics
from service.core.data import prepare
from service.core.errors import BudgetError, Cell, InputError, ResponseChoice
from service.core.spec import PredictorSpec, Specification, build_design
from service.selection.deadline import Deadline
from service.selection.entries import EntryReport, Simplicity
from service.selection.search import SelectionReport, places, rank, run_selection, select
from service.selection.search_setup import Scored, SearchOptions

from tests.typed import predictors, responses, spec_dict, tf


def _scored(resp: str, pred: str, value: float, se: float, folds=None) -> Scored:
    spec = Specification("y", tf({"name": resp}), (PredictorSpec("x", tf({"name": pred})),))
    fv = np.array([value]) if folds is None else np.asarray(folds, float)
    return Scored(spec, CVResult("rmse", value, se, fv, Metrics(value, value, None)))


def test_one_se_rule_prefers_the_simplest_inside_the_band():
    # source: Breiman et al. (1984) p. 80; Hastie, Tibshirani & Friedman (2009) p. 61
    # (single fold values: the best candidate's own standard error sets the band)
    best = _scored("box_cox", "log", 10.0, 1.0)
    simple = _scored("identity", "identity", 10.9, 1.0)  # inside best + 1 SE
    middle = _scored("log", "log", 10.5, 1.0)  # inside, less simple
    outside = _scored("identity", "sqrt", 11.5, 1.0)  # outside the band
    ranked, lowest = rank([best, simple, middle, outside])
    assert lowest == pytest.approx(10.0)
    order = [s for s, _ in ranked]
    assert order[0] is simple and order[1] is middle and order[2] is best and order[3] is outside
    parts = [p for _, p in ranked]
    assert [p.within_one_se for p in parts] == [True, True, True, False]


def test_one_threshold_for_every_entry():
    # source: Hastie, Tibshirani & Friedman (2009) sec. 7.10: the band is the lowest CV error
    # plus the standard error of that lowest-error candidate, the same for every candidate.
    # A noisy candidate (large fold-to-fold differences) does not widen it for itself.
    best = _scored("log", "log", 10.0, 0.4, folds=[9.5, 10.5, 9.8, 10.2, 10.0])
    noisy = _scored("identity", "identity", 10.6, 3.0, folds=[5, 16, 7, 14, 11])
    steady = _scored("sqrt", "log", 10.3, 0.4, folds=[9.8, 10.8, 10.1, 10.5, 10.3])
    ranked, _ = rank([best, noisy, steady], folds=5)
    parts = {id(s): p for s, p in ranked}
    assert [p.one_se_threshold for _, p in ranked] == [pytest.approx(10.4)] * 3
    assert parts[id(noisy)].within_one_se is False  # 10.6 > 10.0 + 0.4
    assert parts[id(steady)].within_one_se is True
    assert [s for s, _ in ranked] == [best, steady, noisy]  # log/log is simpler than sqrt/log
    assert parts[id(steady)].simplicity == Simplicity(
        estimated=0, readability=3, transformed_columns=2
    )


def test_places_carry_the_paired_standard_error_of_the_fold_differences():
    best = _scored("log", "log", 10.0, 0.4, folds=[9.5, 10.5, 9.8, 10.2, 10.0])
    noisy = _scored("identity", "identity", 10.6, 3.0, folds=[5, 16, 7, 14, 11])
    steady = _scored("sqrt", "log", 10.3, 0.4, folds=[9.8, 10.8, 10.1, 10.5, 10.3])
    got = places([best, noisy, steady], folds=5)
    assert [p.scored for p in got] == [s for s, _ in rank([best, noisy, steady], folds=5)[0]]
    by = {id(p.scored): p for p in got}
    # source: the standard error of a mean of K paired differences, sd(ddof=1) / sqrt(K)
    # (scipy.stats.sem)
    diff = noisy.cv.fold_values - best.cv.fold_values
    assert by[id(noisy)].paired_std_error == pytest.approx(stats.sem(diff), rel=1e-12)
    assert by[id(noisy)].difference_from_best == pytest.approx(0.6)
    assert by[id(best)].paired_std_error == 0.0 and by[id(best)].within_band
    assert not by[id(noisy)].within_band and by[id(steady)].within_band


def test_select_names_its_rank_1_as_scored():
    result = select(_linear_prep(), SearchOptions(top=2), "test")
    assert result.winner in result.scored
    listed = result.body.ranking[0].specification
    assert listed.predictors[0].column == result.winner.spec.predictors[0].column
    assert listed.response_label() == result.winner.spec.response_label()
    assert result.complete is result.body.search.complete


def test_outside_the_band_is_ordered_by_error():
    a = _scored("identity", "identity", 1.0, 0.01)
    b = _scored("log", "identity", 3.0, 0.01)
    c = _scored("sqrt", "identity", 2.0, 0.01)
    ranked, _ = rank([b, c, a])
    assert [s for s, _ in ranked] == [a, c, b]


def _linear_prep(n=120, seed=3):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    y = 2.0 + 0.5 * x + rng.normal(0, 0.3, n)
    return prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])


def test_max_candidates_stops_the_search_incomplete():
    out = run_selection(_linear_prep(), SearchOptions(max_candidates=3), "t")
    assert out.search.scored + out.search.failed == 3
    assert out.search.complete is False
    assert any("stopped early" in w for w in out.warnings)


def test_time_limit_with_nothing_done_is_a_budget_error():
    with pytest.raises(BudgetError):
        run_selection(_linear_prep(), SearchOptions(time_limit_s=1e-9), "t")


def test_failed_candidates_do_not_stop_the_search():
    # y near zero with a reciprocal response: some back-transforms are undefined
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 5, 80)
    y = np.exp(0.3 * x + rng.normal(0, 1.0, 80))
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    out = run_selection(
        prep,
        SearchOptions(
            response_transforms=responses(["identity", "reciprocal"]),
            predictor_transforms=predictors(["identity"]),
        ),
        "t",
    )
    assert out.search.scored >= 1
    for f in out.search.failures:
        assert f.reason
    # failures grouped by reason with counts that add up to the failed candidates
    groups = out.search.failure_reasons
    if out.search.failed:
        assert sum(g.candidates for g in groups) == out.search.failed
        assert [g.candidates for g in groups] == sorted(
            (g.candidates for g in groups), reverse=True
        )
        (warning,) = [w for w in out.warnings if "could not be scored" in w]
        assert "(s)" not in warning and groups[0].reason in warning


def test_failures_are_grouped_by_reason_with_counts():
    # reciprocal response of a widely spread y: some held-out back-transforms are undefined
    rng = np.random.default_rng(1)
    x, z = rng.uniform(0, 5, 80), rng.uniform(0, 5, 80)
    y = np.exp(1.5 * x + rng.normal(0, 2.0, 80))
    prep = prepare(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "z": z.tolist()}}, "y", ["x", "z"]
    )
    out = run_selection(
        prep,
        SearchOptions(
            response_transforms=responses(["identity", "reciprocal", "sqrt"]),
            predictor_transforms=predictors(["identity", "log", "square", "reciprocal"]),
        ),
        "t",
    )
    failed = out.search.failed
    groups = out.search.failure_reasons
    assert failed > 0 and groups
    counts = [g.candidates for g in groups]
    assert counts == sorted(counts, reverse=True) and sum(counts) <= failed
    # reasons that differ only in fold and row counts are one group
    assert sum("back-transform of 1/y" in g.reason for g in groups) == 1
    (warning,) = [w for w in out.warnings if "could not be scored" in w]
    assert warning.startswith(f"{failed} candidates could not be scored")
    assert f"{counts[0]} candidate" in warning and groups[0].reason in warning
    assert "(s)" not in warning


def test_explicit_inapplicable_transform_is_an_input_error():
    rng = np.random.default_rng(0)
    x = rng.uniform(0, 5, 50)
    y = x - 2 + rng.normal(0, 0.1, 50)  # has negatives
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    with pytest.raises(InputError) as exc:
        run_selection(prep, SearchOptions(response_transforms=responses(["identity", "log"])), "t")
    # the first place is the first row the explicit log cannot take, then the transform
    assert exc.value.problems[0].where == Cell("y", int(np.argmax(y <= 0)), "columns")
    assert exc.value.problems[1].where == ResponseChoice(1)
    assert "yeo_johnson" in exc.value.problems[0].detail


def test_same_request_gives_identical_numbers():
    a = run_selection(_linear_prep(), SearchOptions(), "t")
    b = run_selection(_linear_prep(), SearchOptions(), "t")
    ka = [(e.equation, e.cv.value) for e in a.ranking]
    kb = [(e.equation, e.cv.value) for e in b.ranking]
    assert ka == kb


def test_linear_data_keep_the_identity_scale():
    out = run_selection(_linear_prep(n=400), SearchOptions(), "t")
    spec = spec_dict(out.ranking[0].specification)
    assert spec["response"]["transform"]["name"] == "identity"
    assert spec["predictors"][0]["transform"]["name"] == "identity"


def test_grouped_selection_shares_one_time_budget():
    from service.core.data import prepare as prep_fn
    from service.selection.groups import GroupFailure, run_grouped

    rng = np.random.default_rng(5)
    n = 240
    x = rng.uniform(1, 10, n)
    y = 2.0 + 0.5 * x + rng.normal(0, 0.3, n)
    g = [f"g{i % 8}" for i in range(n)]
    prep = prep_fn(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "g": g}}, "y", ["x"], group_by="g"
    )
    shared = Deadline.after(1e-6)  # the request's one deadline, spent by the first group
    out = run_grouped(prep, SearchOptions(deadline=shared), "t")
    assert out.search.groups == 8
    assert out.search.complete is False
    assert all(b.record.over_budget for b in out.groups.values())  # rendered as 503
    # without a request deadline (a batch of segments) every group counts from its own start
    gone = Deadline(time.monotonic() - 1.0, 60.0)
    each = run_grouped(prep, SearchOptions(time_limit_s=60.0), "t")
    assert each.search.complete
    assert not any(isinstance(b, GroupFailure) for b in each.groups.values())
    late = run_grouped(prep, SearchOptions(time_limit_s=60.0, deadline=gone), "t")
    assert all(b.record.over_budget for b in late.groups.values())


def test_the_result_is_typed_and_the_body_holds_only_contract_fields():
    """The ranked candidates and the fold plan travel beside the body, not inside it: the
    body is exactly what the JSON response carries (no private keys to strip)."""
    prep = _linear_prep()
    result = select(prep, SearchOptions(top=2), "t")
    assert isinstance(result.body, SelectionReport)
    assert all(isinstance(e, EntryReport) for e in result.body.ranking)
    first = spec_dict(result.body.ranking[0].specification)
    assert any(spec_dict(s.spec) == first for s in result.scored)
    assert result.plan.folds == 5 and result.plan.n_splits == 5
    # source: numpy lstsq of rank 1's design on all rows equals the reported coefficients
    winner = next(s for s in result.scored if spec_dict(s.spec) == first)
    d = build_design(winner.spec, prep)
    z = winner.spec.response_transform.forward(prep.y)
    coef = np.linalg.lstsq(d.X, z, rcond=None)[0]
    got = [row.estimate for row in result.body.ranking[0].coefficients]
    np.testing.assert_allclose(got, coef, rtol=1e-9, atol=1e-12)


def test_batches_shrink_with_rows_and_splits_so_the_clock_is_asked_often():
    from service.selection.search import MAX_BATCH, batch_size

    assert batch_size(300, 5) == MAX_BATCH  # the demo: full batches
    assert batch_size(120, 2500) == 3  # 50 folds x 50 repeats: a few candidates at a time
    assert batch_size(1_000_000, 5) == 1  # large tables: one candidate between two looks
    # the exhaustive search's fixed list: larger batches, the same work between two looks,
    # unless there are many splits (then each fold's own overhead makes a batch's time)
    from service.selection.search import GRID_BATCH, grid_batch_size

    assert grid_batch_size(3000, 5) == 266
    assert grid_batch_size(300, 5) == GRID_BATCH
    assert grid_batch_size(1_000_000, 5) == 1
    assert grid_batch_size(120, 2500) == batch_size(120, 2500) == 3


def test_powers_and_lambdas_found_together_give_the_one_at_a_time_selection(monkeypatch):
    from service.core.fastcv import Scorer

    rng = np.random.default_rng(14)
    n = 150
    x1, x2 = rng.uniform(1, 12, n), rng.uniform(0.5, 6, n)
    y = np.exp(1.0 + 0.5 * np.sqrt(x1) - 0.3 * np.log(x2) + rng.normal(0, 0.2, n))
    columns = {"y": y.tolist(), "a": x1.tolist(), "b": x2.tolist()}
    prep = prepare({"columns": columns}, "y", ["a", "b"])
    # "power": estimated in every fold; box_cox / yeo_johnson: a lambda in every fold
    opts = SearchOptions(
        folds=5, repeats=2, predictor_transforms=predictors(["identity", "log", "power"])
    )
    found = {"powers": 0, "lambdas": 0}
    real = {"powers": Scorer.powers_many, "lambdas": Scorer.lambdas_many}

    def counted(what):
        def call(self, items):
            got = real[what](self, items)
            found[what] += sum(f is not None for f in got)
            return got

        return call

    monkeypatch.setattr(Scorer, "powers_many", counted("powers"))
    monkeypatch.setattr(Scorer, "lambdas_many", counted("lambdas"))
    together = run_selection(prep, opts, "t")
    assert found["powers"] >= 10 and found["lambdas"] >= 5
    monkeypatch.setattr(Scorer, "powers_many", lambda self, items: [None] * len(items))
    monkeypatch.setattr(Scorer, "lambdas_many", lambda self, items: [None] * len(items))
    alone = run_selection(prep, opts, "t")
    # source: the same search with every candidate's fold powers and lambdas found alone
    # (Scorer.score's own path): the same ranking and the same numbers
    assert [spec_dict(e.specification) for e in together.ranking] == [
        spec_dict(e.specification) for e in alone.ranking
    ]
    for a, b in zip(together.ranking, alone.ranking, strict=True):
        assert a.cv.value == pytest.approx(b.cv.value, rel=1e-9)
    assert together.search.scored == alone.search.scored


def test_a_ladder_reading_the_bank_lacks_leaves_the_other_powers_estimated():
    # two estimated powers, one read as a ladder rung (x2^-0.5) that the screening did not
    # add to the bank, the other still estimated: the reading keeps its estimate, no error
    rng = np.random.default_rng(7)
    n = 160
    x1, x2 = rng.uniform(1, 30, n), rng.uniform(0.5, 9, n)
    site = rng.choice(["n", "s", "w"], n)
    rng.normal(0, 0.08, n)  # the draws of the table this case was found on, in order
    rng.choice(["p", "q"], n)
    y = 3 + 2 * x1**0.5 + rng.normal(0, 0.3 * (1 + x2 / 3), n)
    cols = {"y": y.tolist(), "x1": x1.tolist(), "x2": x2.tolist(), "site": site.tolist()}
    prep = prepare({"columns": cols}, "y", ["x1", "x2", "site"], ["site"])
    result = select(prep, SearchOptions(metric="mape"), "test")
    first = result.body.ranking[0]
    winner = next(s for s in result.scored if spec_dict(s.spec) == spec_dict(first.specification))
    d = build_design(winner.spec, prep)
    coef = np.linalg.lstsq(d.X, winner.spec.response_transform.forward(prep.y), rcond=None)[0]
    # source: numpy lstsq of rank 1's design on all rows equals the reported coefficients
    got = [row.estimate for row in first.coefficients]
    np.testing.assert_allclose(got, coef, rtol=1e-9, atol=1e-12)


def test_all_rows_powers_kept_from_screening_give_the_same_selection(monkeypatch):
    from service.selection import candidates as cand
    from service.selection import search as search_mod

    rng = np.random.default_rng(15)
    n = 160
    x1, x2 = rng.uniform(1, 12, n), rng.uniform(0.5, 6, n)
    y = np.exp(1.0 + 0.4 * np.sqrt(x1) - 0.3 * np.log(x2) + rng.normal(0, 0.2, n))
    columns = {"y": y.tolist(), "a": x1.tolist(), "b": x2.tolist()}
    prep = prepare({"columns": columns}, "y", ["a", "b"])
    opts = SearchOptions(
        folds=5, repeats=1, predictor_transforms=predictors(["identity", "log", "power"])
    )
    evaluators: list[search_mod._Evaluator] = []
    real_init = search_mod._Evaluator.__init__

    def kept(self, *a, **k):
        real_init(self, *a, **k)
        evaluators.append(self)

    monkeypatch.setattr(search_mod._Evaluator, "__init__", kept)
    reused = run_selection(prep, opts, "t")
    assert evaluators[0].fits.hits >= 4  # identical inputs were met and reused
    monkeypatch.setattr(cand.PowerFits, "get", lambda self, *a: None)
    fresh = run_selection(prep, opts, "t")
    a_ev, b_ev = evaluators
    # source: the same search with every candidate's all-rows powers estimated again
    # (boxtidwell.estimate_many_powers, the batch the kept fits replace): the same
    # candidates, errors and powers (all rows and per fold) to that batch's stated
    # agreement with one estimate_powers call each, and the same ranking
    opened = [(s.open_spec or s.spec).key for s in a_ev.scored]
    assert opened == [(s.open_spec or s.spec).key for s in b_ev.scored]
    compared = 0
    for a, b in zip(a_ev.scored, b_ev.scored, strict=True):
        assert a.cv.value == pytest.approx(b.cv.value, rel=1e-9)
        if a.open_spec is None:
            continue
        # (a power that reads as a plain column is kept under that column's key)
        mine, theirs = a_ev.powers.get(a.spec.key, {}), b_ev.powers.get(b.spec.key, {})
        assert mine.keys() == theirs.keys()
        for col, got in mine.items():
            want = theirs[col]
            assert got.power == pytest.approx(want.power, rel=1e-9, abs=1e-11)
            assert got.per_fold == pytest.approx(want.per_fold, rel=1e-8, abs=1e-10)
            compared += 1
    assert compared >= 4
    assert [spec_dict(e.specification) for e in reused.ranking] == [
        spec_dict(e.specification) for e in fresh.ranking
    ]


def test_kept_lambdas_are_the_estimate_of_the_same_inputs_and_only_of_those(monkeypatch):
    from service.core.errors import CandidateFailure
    from service.core.likelihood import estimate_lambda
    from service.selection import search as search_mod
    from service.selection.search import KeptLambdas

    rng = np.random.default_rng(8)
    n = 120
    x = rng.uniform(1, 10, n)
    y = np.exp(0.3 + 0.2 * x + rng.normal(0, 0.2, n))
    X = np.column_stack([np.ones(n), x])
    kept = KeptLambdas()
    got = kept.estimate("box_cox", y, X)
    # source: likelihood.estimate_lambda on the same arrays (the straightforward call)
    assert got == estimate_lambda("box_cox", y, X)
    assert kept.estimate("box_cox", y, X.copy()) is got and kept.hits == 1
    other = kept.estimate("box_cox", y, np.column_stack([np.ones(n), np.log(x)]))
    assert other == estimate_lambda("box_cox", y, np.column_stack([np.ones(n), np.log(x)]))
    assert kept.estimate("yeo_johnson", y, X) == estimate_lambda("yeo_johnson", y, X)
    assert kept.hits == 1  # another design or family is a miss
    calls = []

    def failing(family, y, X):
        calls.append(family)
        raise CandidateFailure("no lambda for these rows")

    monkeypatch.setattr(search_mod, "estimate_lambda", failing)
    for _ in range(2):
        with pytest.raises(CandidateFailure) as again:
            kept.estimate("box_cox", y[::-1].copy(), X)
        assert again.value.reason == "no lambda for these rows"
    assert calls == ["box_cox"] and kept.hits == 2  # a failure is kept and raised again


def test_lambdas_kept_within_a_request_give_the_same_selection(monkeypatch):
    from service.core.likelihood import estimate_lambda
    from service.demo import demo_columns
    from service.selection import search as search_mod

    cols = demo_columns(300)
    columns = {k: cols[k] for k in ("repair_cost", "pipe_length_m")}
    prep = prepare({"columns": columns}, "repair_cost", ["pipe_length_m"])
    made: list[search_mod.KeptLambdas] = []
    real_init = search_mod.KeptLambdas.__init__

    def kept(self):
        real_init(self)
        made.append(self)

    monkeypatch.setattr(search_mod.KeptLambdas, "__init__", kept)
    reused = run_selection(prep, SearchOptions(), "t")
    assert made[0].hits >= 1  # the same estimate was asked for twice
    monkeypatch.setattr(
        search_mod.KeptLambdas, "estimate", lambda self, f, y, X: estimate_lambda(f, y, X)
    )
    fresh = run_selection(prep, SearchOptions(), "t")
    # source: the same search with every lambda estimated again (estimate_lambda each time):
    # the reported Box-Cox block, its context on rank 1's design and the entries' ladder
    # readings are identical
    assert reused.search.box_cox == fresh.search.box_cox
    assert reused.search.box_cox.context is not None
    for a, b in zip(reused.ranking, fresh.ranking, strict=True):
        assert a.specification == b.specification
        assert a.estimates == b.estimates


def test_screening_powers_stop_at_their_share_of_the_time_left_and_say_so(monkeypatch):
    from service.selection import search as search_mod

    rng = np.random.default_rng(41)
    n = 120
    x1, x2 = rng.uniform(1, 12, n), rng.uniform(0.5, 6, n)
    y = np.exp(0.5 + 0.3 * np.log(x1) + 0.2 * np.sqrt(x2) + rng.normal(0, 0.2, n))
    prep = prepare(
        {"columns": {"y": y.tolist(), "a": x1.tolist(), "b": x2.tolist()}}, "y", ["a", "b"]
    )
    opts = SearchOptions(
        folds=5, repeats=1, predictor_transforms=predictors(["identity", "log", "power"])
    )
    full = select(prep, opts, "t").body
    assert full.search.predictor_powers  # estimated with the default share
    assert not any("screening step's share" in w for w in full.warnings)
    # a share of nothing: the screening step ends before its first predictor, the search
    # still scores candidates (without the estimated powers' ladder rungs) and says which
    monkeypatch.setattr(search_mod, "SCREEN_SHARE", 0.0)
    cut = select(prep, opts, "t").body
    said = [w for w in cut.warnings if "screening step's share" in w]
    assert len(said) == 1 and "2 predictors of 2 (a, b)" in said[0]
    assert not cut.search.predictor_powers and cut.ranking
    assert cut.search.scored > 0


def _wide_prep(n=200, p=4, seed=5):
    rng = np.random.default_rng(seed)
    X = rng.uniform(1, 10, (n, p))
    y = 2.0 + X @ np.full(p, 0.3) + rng.normal(0, 1.0, n)
    cols = {f"x{j}": X[:, j].tolist() for j in range(p)}
    return prepare({"columns": {"y": y.tolist(), **cols}}, "y", list(cols))


def test_white_runs_for_the_listed_entries_only_and_no_test_twice(monkeypatch):
    from service.core import _condition_tests as ct

    calls = {"white": 0, "bp": 0}
    real_white, real_bp = ct.white_test_of, ct.breusch_pagan_test

    def white(*a, **k):
        calls["white"] += 1
        return real_white(*a, **k)

    def bp(*a, **k):
        calls["bp"] += 1
        return real_bp(*a, **k)

    monkeypatch.setattr(ct, "white_test_of", white)  # the listed entries' White
    monkeypatch.setattr(ct, "white_test", lambda *a, **k: pytest.fail("White for a member"))
    monkeypatch.setattr(ct, "breusch_pagan_test", bp)
    out = run_selection(_wide_prep(), SearchOptions(top=3), "t")
    compared = out.search.band.members_compared
    assert compared > len(out.ranking) == 3
    # each compared member assessed once (the listed ones among them), White only listed
    assert calls == {"white": 3, "bp": compared}
    for e in out.ranking:
        white_check = e.conditions.equal_variance.tests[1]
        assert white_check.name == "White" and white_check.statistic is not None


def test_band_members_are_compared_while_the_time_left_holds_one_more(monkeypatch):
    from service.selection import search as search_mod

    real = search_mod.entry_for

    def slow(*a, **k):
        time.sleep(0.4)  # each entry as dear as a wide design's
        return real(*a, **k)

    monkeypatch.setattr(search_mod, "entry_for", slow)
    t0 = time.perf_counter()
    out = run_selection(_wide_prep(), SearchOptions(top=3, time_limit_s=3.0), "t")
    elapsed = time.perf_counter() - t0
    compared = out.search.band.members_compared
    assert 3 <= compared < 15  # the listed entries always; not the 15 leading members
    assert any(
        f"conditions of {compared} of the band's" in w and "time limit of 3 s" in w
        for w in out.warnings
    )
    assert elapsed < 3.0 + 4.0  # generous bound: one entry past the limit at most
    for e in out.ranking:  # no time left for White: each listed entry says so
        reason = e.conditions.equal_variance.tests[1].reason
        assert e.conditions.equal_variance.tests[1].statistic is not None or "not run" in reason


def test_the_work_after_the_search_is_estimated_from_rows_and_columns():
    from service.core.conditions import white_seconds
    from service.selection.search import ENTRY_FIXED_S, ENTRY_S_PER_CELL, listing_seconds

    # 15 members of 31 columns at 10,000 rows, White for 3 (496 auxiliary columns)
    got = listing_seconds(10_000, 31, 15, 3)
    want = 15 * (ENTRY_FIXED_S + ENTRY_S_PER_CELL * 10_000 * 31) + 3 * white_seconds(10_000, 31)
    assert got == pytest.approx(want)
    assert 5.0 < got < 15.0  # measured: about 0.35 s an entry and 0.2 s a White test
    assert listing_seconds(300, 6, 15, 5) < 1.0  # the demo's size costs next to nothing


def test_an_incumbent_the_search_listed_is_not_fitted_and_assessed_again(monkeypatch):
    from service.core import transforms as tr
    from service.selection import search as search_mod
    from service.selection.search_setup import SentSpecification

    prep = _wide_prep(p=2)
    made: list = []
    real = search_mod.entry_for

    def counted(spec, *a, **k):
        made.append(spec.key)
        return real(spec, *a, **k)

    monkeypatch.setattr(search_mod, "entry_for", counted)
    plain = Specification(
        "y", tr.Transform("identity"), tuple(PredictorSpec(c, tf("identity")) for c in ("x0", "x1"))
    )
    out = run_selection(prep, SearchOptions(incumbent=SentSpecification(plain)), "t")
    assert out.incumbent is not None and out.incumbent.rank is not None
    assert plain.key in made and len(made) == len(set(made))  # one entry per specification
