"""Diagnostics on within-group residuals, the routing policy and calibration.

Installed as ``famwise.diagnostics`` (see pyproject.toml).  :func:`run_checks`
returns the :class:`Findings` that :mod:`famwise.diagnostics.route` turns
into a procedure and its reasons.
"""

from ..core.layout import Layout
from .check import VERDICTS, Check, Findings
from .design import design_checks
from .policy import Policy, load_policy
from .shape import shape_checks
from .spread import spread_checks

__all__ = ["Check", "Findings", "Policy", "VERDICTS", "load_policy", "run_checks"]


def run_checks(layout: Layout, policy: Policy | None = None) -> Findings:
    """Run the shape, spread and design checks on ``layout``.

    With a design (blocks, covariates) the shape and spread checks run on the
    residuals of the model (:mod:`famwise.diagnostics.model_checks`), and
    with blocks Tukey's test of non-additivity joins the design checks.
    """
    policy = policy or Policy()
    if layout.design is not None:
        from .model_checks import model_shape_checks, model_spread_checks, nonadditivity_check
        extra = nonadditivity_check(layout, policy)
        return Findings(shape=model_shape_checks(layout, policy),
                        spread=model_spread_checks(layout, policy),
                        design=design_checks(layout, policy) + ((extra,) if extra else ()))
    return Findings(shape=shape_checks(layout, policy), spread=spread_checks(layout, policy),
                    design=design_checks(layout, policy))
