"""The plan's "does not hold its level" judgement, over all the sizes tried.

Reference: the binomial distribution of a Monte Carlo error-rate estimate
(``r`` data sets at a true familywise error of exactly alpha) -- a fact of
the trade, no source needed.  A procedure whose level is exactly alpha must
be flagged rarely (the rule's two parts each spend 2.5%), however many sizes
the plan tries; one whose level is clearly above alpha must be flagged.
"""

from types import SimpleNamespace

import numpy as np
import pandas as pd

from famwise.report.plan_text import liberal_procedures


def _result(estimates: dict, r: int, alpha: float = 0.05):
    rows = [{"n_per_group": n, "procedure": p, "fwer": f}
            for p, values in estimates.items() for n, f in zip(range(4, 4 + len(values)), values)]
    return SimpleNamespace(settings={"alpha": alpha, "replicates": r}, table=pd.DataFrame(rows))


def test_exact_level_is_rarely_flagged_over_many_sizes():
    rng = np.random.default_rng(7)
    r, sizes, trials = 2000, 8, 4000
    draws = rng.binomial(r, 0.05, size=(trials, sizes)) / r
    flagged = sum(bool(liberal_procedures(_result({"p": d}, r))) for d in draws)
    # at most 2.5% + 2.5% by construction; allow 3 binomial SEs of the 4,000 trials
    assert flagged / trials <= 0.05 + 3 * (0.05 * 0.95 / trials) ** 0.5
    # the old rule (the largest of eight estimates above alpha + 2 SE) flagged ~1 - 0.977**8
    se = (0.05 * 0.95 / r) ** 0.5
    assert (draws.max(axis=1) > 0.05 + 2 * se).mean() > 0.12


def test_clearly_liberal_procedure_is_flagged_with_its_worst_size():
    rng = np.random.default_rng(8)
    r = 2000
    est = rng.binomial(r, 0.065, size=6) / r
    out = liberal_procedures(_result({"liberal": est, "exact": np.full(6, 0.05)}, r))
    assert list(out) == ["liberal"]
    assert out["liberal"]["worst"] == est.max()
    assert out["liberal"]["worst_n"] == 4 + int(est.argmax())
    assert abs(out["liberal"]["mean"] - est.mean()) < 1e-12
