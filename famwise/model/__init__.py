"""The model stage: from observations to what every mean-based procedure needs
(estimates, their covariance, residual df, residuals for the checks)."""
