"""Scaling (allometric) line fits with confidence intervals, tests and flags.

One idea per file: :mod:`.result` (the result objects), :mod:`.core` (the line record
and moments), :mod:`.least_squares`, :mod:`.model2` (SMA, MA), :mod:`.robust` (Huber,
LTS), :mod:`.dispatch` (method name to function), :mod:`.resampling` (bootstrap),
:mod:`.groups` (group comparisons), :mod:`.broken` (breakpoint), :mod:`.table`
(table to arrays) and :mod:`.scaling` (the :func:`fit` front end).


The model is Y = alpha + beta X on the fitted scale, with X = log(x) and
Y = log(y) by default (base 10; ``log="e"`` or ``"none"``), so that
y = 10^alpha x^beta. Methods:

``ols``     ordinary least squares of Y on X (statsmodels OLS). Assumes X is
            measured without error; error in X attenuates the slope.
``sma``     standardized major axis, beta = sign(r) s_Y / s_X (model II).
``ma``      major axis, the leading eigenvector of the covariance (model II;
            not invariant to the scale of the axes, so use it on log data).
``robust``  Huber M-estimation (statsmodels RLM, c = 1.345, MAD scale) with
            its final weights reported; resists outlying Y, not leverage points.
``lts``     least trimmed squares (h = floor((n + p + 1)/2)) by concentration
            steps from all (or many) two-point starts, then a reweighted
            least-squares fit on the points whose |LTS residual| <= 2.5 scale.
``pgls``    phylogenetic GLS, computed by :mod:`comparo.phylo`.

All moments use the divisor n - 1. Nothing is dropped silently: rows with a
missing or non-numeric value, or a non-positive value under a log transform,
are listed in ``excluded`` with the reason.

References
----------
Warton, D. I., Wright, I. J., Falster, D. S. & Westoby, M. (2006). Bivariate
    line-fitting methods for allometry. Biological Reviews 81, 259-291.
Warton, D. I. & Weber, N. C. (2002). Common slope tests for bivariate errors-
    in-variables models. Biometrical Journal 44, 161-174.
Pitman, E. J. G. (1939). A note on normal correlation. Biometrika 31, 9-12.
Huber, P. J. (1964). Robust estimation of a location parameter. Annals of
    Mathematical Statistics 35, 73-101.
Rousseeuw, P. J. (1984). Least median of squares regression. Journal of the
    American Statistical Association 79, 871-880.
Rousseeuw, P. J. & Van Driessen, K. (2006). Computing LTS regression for large
    data sets. Data Mining and Knowledge Discovery 12, 29-45.
Muggeo, V. M. R. (2003). Estimating regression models with unknown break-
    points. Statistics in Medicine 22, 3055-3071.
Davies, R. B. (1987). Hypothesis testing when a nuisance parameter is present
    only under the alternative. Biometrika 74, 33-43.
Efron, B. (1987). Better bootstrap confidence intervals. Journal of the
    American Statistical Association 82, 171-185.
"""

from __future__ import annotations

from comparo.fitting.breakpoint import segmented_line
from comparo.fitting.comparison import Comparison, compare
from comparo.fitting.core import LOGS, METHODS, slope_from_moments
from comparo.fitting.groups import common_slope_model2, group_fits
from comparo.fitting.least_squares import ols_line
from comparo.fitting.model2 import model2_line, model2_test
from comparo.fitting.multiple import MultipleFit
from comparo.fitting.multiple_extras import multiple_fit
from comparo.fitting.resampling import bootstrap_line
from comparo.fitting.result import FitResult, FlaggedRefit
from comparo.fitting.robust import HUBER_C, LTS_CUT, LTSLine, huber_line, lts_fit, lts_line
from comparo.fitting.scaling import fit, phylo_fit

__all__ = [
    "HUBER_C",
    "LOGS",
    "LTS_CUT",
    "METHODS",
    "Comparison",
    "FitResult",
    "FlaggedRefit",
    "LTSLine",
    "MultipleFit",
    "bootstrap_line",
    "common_slope_model2",
    "compare",
    "fit",
    "phylo_fit",
    "group_fits",
    "huber_line",
    "lts_fit",
    "lts_line",
    "model2_line",
    "model2_test",
    "multiple_fit",
    "ols_line",
    "segmented_line",
    "slope_from_moments",
]
