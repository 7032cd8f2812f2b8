"""Rubin's rules: one estimate and its uncertainty from m fits of multiply imputed data.

Rubin DB (1987) Multiple imputation for nonresponse in surveys. Wiley, New York (the
combining rules and the degrees of freedom (m - 1)(1 + 1/r)², r the relative increase in
variance due to nonresponse).
Barnard J, Rubin DB (1999) Small-sample degrees of freedom with multiple imputation.
Biometrika 86:948-955 (the degrees of freedom when the complete-data ones are finite).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

from comparo.base.errors import UsageError


@dataclass(frozen=True)
class Pooled:
    """One quantity combined over m completed data sets (Rubin 1987).

    Attributes
    ----------
    m : int
        Completed data sets combined.
    estimate : float
        Q̄, the mean of the m estimates (the unit of the estimates).
    within : float
        Ū, the mean of the m squared standard errors (within-imputation variance).
    between : float
        B, the sample variance of the m estimates (between-imputation variance).
    total : float
        T = Ū + (1 + 1/m)B, the variance of Q̄.
    se : float
        √T.
    df : float
        Degrees of freedom of (Q − Q̄)/√T ~ t_df: Barnard & Rubin (1999) when the
        complete-data degrees of freedom are given, else Rubin's (1987) (m − 1)(1 + 1/r)²;
        infinite when B = 0 and no complete-data df are given.
    df_rule : str
        ``"barnard-rubin-1999"`` or ``"rubin-1987"``.
    relative_increase : float
        r = (1 + 1/m)B/Ū, the relative increase in variance due to the missing values.
    missing_information : float
        γ = (1 + 1/m)B/T, the fraction of the variance due to the missing values (the
        large-m fraction of missing information).
    """

    m: int
    estimate: float
    within: float
    between: float
    total: float
    se: float
    df: float
    df_rule: str
    relative_increase: float
    missing_information: float

    def ci(self, level: float = 0.95) -> tuple[float, float]:
        """Q̄ ± t_{df, (1+level)/2}·√T."""
        from scipy.stats import norm, t

        p = 0.5 + level / 2.0
        q = float(norm.ppf(p)) if math.isinf(self.df) else float(t.ppf(p, self.df))
        return (self.estimate - q * self.se, self.estimate + q * self.se)

    def to_dict(self) -> dict:
        return {
            "m": self.m,
            "estimate": self.estimate,
            "within": self.within,
            "between": self.between,
            "total": self.total,
            "se": self.se,
            "df": None if math.isinf(self.df) else self.df,
            "df_rule": self.df_rule,
            "relative_increase": self.relative_increase,
            "missing_information": self.missing_information,
        }


def rubin_pool(
    estimates: Sequence[float], variances: Sequence[float], df_complete: float | None = None
) -> Pooled:
    """Combine m estimates and their squared standard errors by Rubin's rules.

    Q̄ = mean(Q_k); Ū = mean(U_k); B = Σ(Q_k − Q̄)²/(m − 1); T = Ū + (1 + 1/m)B.
    Degrees of freedom: Rubin (1987) ν_m = (m − 1)(1 + 1/r)², r = (1 + 1/m)B/Ū; with the
    complete-data degrees of freedom ν_com given, Barnard & Rubin (1999)
    ν = (1/ν_m + 1/ν_obs)⁻¹, ν_obs = (ν_com + 1)/(ν_com + 3)·ν_com·(1 − γ), γ = (1 + 1/m)B/T.

    Parameters
    ----------
    estimates, variances : sequences of m >= 2 floats
        Each completed data set's estimate and its variance (squared SE, same units²).
    df_complete : float, optional
        Degrees of freedom of the complete-data t statistic (e.g. n − 2 for a line).
    """
    q = [float(v) for v in estimates]
    u = [float(v) for v in variances]
    m = len(q)
    if m < 2 or len(u) != m:
        raise UsageError(f"Rubin's rules need m >= 2 estimates with variances (got {m})")
    if any(not math.isfinite(v) for v in q + u) or any(v < 0 for v in u):
        raise UsageError("Rubin's rules need finite estimates and variances >= 0")
    qbar = sum(q) / m
    ubar = sum(u) / m
    b = sum((v - qbar) ** 2 for v in q) / (m - 1)
    extra = (1.0 + 1.0 / m) * b
    total = ubar + extra
    r = extra / ubar if ubar > 0 else math.inf
    gamma = extra / total if total > 0 else 0.0
    nu_m = math.inf if extra == 0 else (m - 1) * (1.0 + 1.0 / r) ** 2
    if df_complete is None:
        df, rule = nu_m, "rubin-1987"
    else:
        nu_c = float(df_complete)
        nu_obs = (nu_c + 1.0) / (nu_c + 3.0) * nu_c * (1.0 - gamma)
        df = nu_obs if math.isinf(nu_m) else 1.0 / (1.0 / nu_m + 1.0 / nu_obs)
        rule = "barnard-rubin-1999"
    return Pooled(m, qbar, ubar, b, total, math.sqrt(total), df, rule, r, gamma)
