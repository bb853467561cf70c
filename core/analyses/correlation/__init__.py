"""Time correlations of scalar series: autocorrelation, statistical inefficiency, blocking, equilibration.

Conventions (kept apart on purpose, because sources disagree):

* ``g`` -- the **statistical inefficiency**, ``g = 1 + 2 sum_{k>=1} rho(k)``, in samples. The number of
  effectively independent samples is ``N_eff = N / g``. ``g >= 1`` always (we clip).
  Some libraries call this number "tau" (emcee's ``integrated_time`` returns g).
* ``tau_int`` -- Sokal's **integrated autocorrelation time with the 1/2**, ``tau_int = 1/2 + sum rho(k)
  = g / 2``. Fields carry the name ``tau_int_sokal`` and a unit (``_samples`` or ``_ps``).
* pymbar's ``integratedAutocorrelationTime`` is ``(g - 1) / 2``; we do not expose that number.

Estimators of g:

* ``"sokal"`` -- sum of the (biased) autocorrelation up to the automatic window M, the smallest M with
  ``M >= c * g(M)``, c = 5 by default. A. D. Sokal, "Monte Carlo Methods in Statistical Mechanics:
  Foundations and New Algorithms", in Functional Integration, NATO ASI Series B 361 (1997) 131-192;
  N. Madras and A. D. Sokal, J. Stat. Phys. 50, 109 (1988).
* ``"geyer"`` -- Geyer's initial positive sequence: sums of adjacent autocovariance pairs
  ``Gamma_m = gamma(2m) + gamma(2m+1)`` truncated at the first non-positive pair, optionally made
  monotone. C. J. Geyer, Statistical Science 7(4), 473-483 (1992).
* ``"first_zero"`` -- sum until the first non-positive autocorrelation after a minimum of 3 lags,
  as in J. D. Chodera, W. C. Swope, J. W. Pitera, C. Seok, K. A. Dill, J. Chem. Theory Comput. 3,
  26-41 (2007).

Block averaging: H. Flyvbjerg and H. G. Petersen, J. Chem. Phys. 91, 461 (1989), with the plateau
level chosen automatically by the test of M. Jonsson, Phys. Rev. E 98, 043304 (2018).
Equilibration detection: J. D. Chodera, J. Chem. Theory Comput. 12, 1799-1805 (2016).

Every kernel accepts 2D input with ``axis=`` so that many series are handled in one vectorised call.

Modules: ``acf`` (FFT kernels, verdict kinds), ``inefficiency`` (g and its estimators), ``blocking``, ``series``
(one series, all the numbers; equilibration), ``request`` (:class:`CorrelationRequest`).
"""

from phasewake.core.analyses.correlation.acf import (
    AUTO,
    METHODS,
    MIN_SAMPLES,
    OSCILLATION_DEPTH,
    OSCILLATION_NOISE_SIGMAS,
    Method,
    Normalisation,
    autocorrelation,
    autocovariance,
    cross_correlation,
)
from phasewake.core.analyses.correlation.blocking import BlockingResult, blocking
from phasewake.core.analyses.correlation.inefficiency import (
    AutoEstimate,
    auto_estimate,
    effective_sample_size,
    one_blas_thread,
    statistical_inefficiency,
)
from phasewake.core.analyses.correlation.series import (
    CorrelationResult,
    EquilibrationResult,
    analyse_series,
    detect_equilibration,
    equilibration_work,
    judge_equilibration,
    judge_ess,
    judge_estimators,
)

__all__ = [
    "AUTO", "METHODS", "MIN_SAMPLES", "OSCILLATION_DEPTH", "OSCILLATION_NOISE_SIGMAS", "AutoEstimate",
    "BlockingResult", "CorrelationResult", "EquilibrationResult", "Method", "Normalisation", "analyse_series",
    "auto_estimate", "autocorrelation", "autocovariance", "blocking", "cross_correlation", "detect_equilibration",
    "effective_sample_size", "equilibration_work", "judge_equilibration", "judge_ess", "judge_estimators",
    "one_blas_thread", "statistical_inefficiency",
]
