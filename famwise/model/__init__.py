"""The model stage: from observations to what every mean-based procedure needs
(estimates, their covariance, residual df, residuals for the checks).

:func:`fit_model` fits ``response = group + block(s) + covariate(s)`` by QR
and returns a :class:`ModelFit`; :mod:`famwise.model.anova` holds the
analysis-of-variance tables, the relative efficiency of blocking and Tukey's
test of non-additivity.
"""

from .fit import ModelDesign, ModelFit, ModelTerm, fit_model

__all__ = ["fit_model", "ModelFit", "ModelDesign", "ModelTerm"]
