"""Property-based checks (hypothesis): random small tasks and hostile rule texts."""
import time

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import learnopt as lo

LOSSES = {"squared": lambda: lo.loss.squared(), "huber": lambda: lo.loss.huber(0.8),
          "absolute": lambda: lo.loss.absolute(), "quantile": lambda: lo.loss.quantile(0.3),
          "logistic": lambda: lo.loss.logistic(), "hinge": lambda: lo.loss.hinge(),
          "squared_hinge": lambda: lo.loss.squared_hinge()}
CLASSIFY = {"logistic", "hinge", "squared_hinge"}
PENALTIES = {"none": None, "l1": lambda: lo.penalty.l1(0.05), "l2": lambda: lo.penalty.l2(0.05),
             "elastic_net": lambda: lo.penalty.elastic_net(0.05, 0.5)}
RULES = {"none": (), "bounds": ("a >= 0.1", "b <= 0.3"), "sum": ("a + b + c == 0.5",),
         "prediction": ("prediction >= -1 where a > 0",)}


@st.composite
def tasks(draw):
    seed = draw(st.integers(0, 10_000))
    n = draw(st.integers(30, 70))
    loss = draw(st.sampled_from(sorted(LOSSES)))
    pen = draw(st.sampled_from(sorted(PENALTIES)))
    rules = draw(st.sampled_from(sorted(RULES)))
    weighted = draw(st.booleans())
    rng = np.random.default_rng(seed)
    df = pd.DataFrame(rng.normal(size=(n, 3)), columns=["a", "b", "c"])
    signal = df.to_numpy() @ np.array([1.0, -0.7, 0.4]) + 0.5 * rng.normal(size=n)
    df["y"] = np.where(signal > 0, 1, 0) if loss in CLASSIFY else signal
    weights = rng.integers(1, 4, n).astype(float) if weighted else None
    build = lo.classification if loss in CLASSIFY else lo.regression
    task = build(df, "y", loss=LOSSES[loss](), weights=weights).require(*RULES[rules])
    if PENALTIES[pen] is not None:
        task = task.penalize(PENALTIES[pen]())
    return task, df, weights, loss, rng


@settings(max_examples=30, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(tasks())
def test_random_tasks_certify_hold_their_rules_and_agree_across_routes_and_row_order(case):
    task, df, weights, loss, rng = case
    fit = task.solve()
    assert fit.status == "optimal", fit.message
    assert fit.violation <= 1e-6
    direct = task.solve(route="direct")
    # the direct route may fail to certify a hard case (seen: unpenalised logistic with a
    # prediction rule on 30 rows, every solver stopping near rel. gap 3e-7) - that is an honest
    # "unverified"; a certified point can never be worse than another feasible point by more
    # than its own gap
    assert direct.status in ("optimal", "unverified")
    assert fit.objective <= direct.objective + fit.gap + 1e-9
    if direct.status == "optimal":
        assert abs(fit.objective - direct.objective) <= fit.gap + direct.gap + 1e-9
    order = rng.permutation(len(df))
    build = lo.classification if loss in CLASSIFY else lo.regression
    shuffled = build(df.iloc[order], "y", loss=task.loss,
                     weights=None if weights is None else weights[order]).require(*[r.text for r in task.rules])
    if task.penalties:
        shuffled = shuffled.penalize(*task.penalties)
    again = shuffled.solve()
    assert abs(again.objective - fit.objective) <= again.gap + fit.gap + 1e-9


HOSTILE = ["__import__('os').system('echo hi')", "a.__class__", "(lambda: 1)()", "open('x')", "a[0]",
           "a if b else c", "a @ b <= 1", "a ** b <= 1", "1e999 * a <= 1", "a <= " + "(" * 200 + "1" + ")" * 200,
           "é >= 0", "a >= 0; b >= 0", "", "   ", "a >= b >= c >= ", "norm2(a) >= 1", "a * b <= 1",
           "increasing()", "mean(prediction where ) <= 1", "`unknown name` >= 0", "a == a == a", "globals()"]


@settings(max_examples=150, deadline=None, derandomize=True)
@given(st.one_of(st.sampled_from(HOSTILE),
                 st.text(alphabet=st.sampled_from(list("abc()+-*/<>=!,. `'\\\"0123456789_eEjnormpredictwh")),
                         max_size=80)))
def test_rule_texts_end_in_a_learnopt_error_or_a_rule(text):
    from conftest import Tally
    reliability = Tally()
    # fuzzing (common practice): whatever the text, the answer is a compiled rule or a
    # LearnoptError naming the rule - never another exception, never code execution or a hang
    df = pd.DataFrame({"a": [0.5, -1.0, 2.0, 0.3], "b": [1.0, 0.0, -1.0, 2.0], "c": [0.0, 1.0, 1.0, 3.0],
                       "y": [1.0, 2.0, 0.5, 1.5]})
    task = lo.regression(df, "y")
    start = time.perf_counter()
    try:
        task.require(text)
        reliability.record("hostile rule", "compiled (a valid rule)")
    except lo.LearnoptError as exc:
        reliability.record("hostile rule", type(exc).__name__)
    assert time.perf_counter() - start < 2.0
