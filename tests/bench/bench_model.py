"""Benchmark the model fit (famwise.model.fit_model), side by side with statsmodels.

Case (target from issue 14): 50 groups x 10 complete blocks x 2 covariates
(500 plots, 61 parameters), the fit with adjusted means, their covariance,
residuals and leverages in at most 50 ms.  Also reported: the same fit with
the adjusted ANOVA table and the blocking efficiency (what ``compare``
records), and statsmodels' OLS fit of the same model with its covariance
(a general least-squares library, for scale; statsmodels is in the test
extras).  The fit is timed from the Layout and its Design, as ``compare``
calls it, without the cache (a fresh Layout each call).  Imports and the
first call are done before timing; "best" is the best of nine calls (the
figure judged against the target: on a shared machine every other process
only adds time), "median" their median.  Exits with status 1 if the target
is missed.
"""

from __future__ import annotations

import sys
import time

import numpy as np

from famwise.core.layout import Layout
from famwise.model import fit_model

TARGET_MS = 50.0


def _design(seed=1, k=50, b=10):
    rng = np.random.default_rng(seed)
    codes = np.repeat(np.arange(k), b)
    blocks = np.tile([f"B{j + 1}" for j in range(b)], k)
    x1, x2 = rng.normal(10, 2, size=k * b), rng.gamma(3.0, 1.0, size=k * b)
    y = (rng.normal(0, 1.5, size=k)[codes] + rng.normal(0, 2, size=b)[np.tile(np.arange(b), k)]
         + 0.4 * x1 - 0.7 * x2 + rng.normal(0, 1, size=k * b))
    return y, codes, blocks, x1, x2, k


def _layout(y, codes, blocks, x1, x2, k):
    lay = Layout(values=y, codes=codes, labels=tuple(f"G{i}" for i in range(k)))
    return lay.with_design(blocks={"block": blocks}, covariates={"x1": x1, "x2": x2})


def _time(fn, repeats=9):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times)), min(times)


def main() -> int:
    data = _design()
    fit_model(_layout(*data))                     # imports and first-call set-up
    first, best = _time(lambda: fit_model(_layout(*data)))

    def with_tables():
        fit = fit_model(_layout(*data))
        fit.anova("adjusted")
        fit.efficiency()

    with_tables()
    t_first, t_best = _time(with_tables)
    rows = [("fit (50 groups x 10 blocks x 2 covariates)", first, best, TARGET_MS),
            ("fit + adjusted ANOVA + efficiency", t_first, t_best, None)]
    try:
        import pandas as pd
        import statsmodels.formula.api as smf
        y, codes, blocks, x1, x2, k = data
        frame = pd.DataFrame({"y": y, "g": codes.astype(str), "b": blocks, "x1": x1,
                              "x2": x2})

        def reference():
            m = smf.ols("y ~ C(g) + C(b) + x1 + x2", data=frame).fit()
            m.cov_params()

        reference()
        s_first, s_best = _time(reference)
        rows.append(("statsmodels OLS of the same model (for scale)", s_first, s_best, None))
    except ImportError:
        pass
    print(f"{'case':<48} {'median ms':>9} {'best ms':>9} {'target':>8}  met")
    ok = True
    for name, f, b, target in rows:
        met = "" if target is None else ("yes" if b * 1e3 <= target else "NO")
        ok &= met != "NO"
        print(f"{name:<48} {f * 1e3:9.2f} {b * 1e3:9.2f} "
              f"{'' if target is None else f'{target:.0f} ms':>8}  {met}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
