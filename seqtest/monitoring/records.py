"""The record of one look of a two-arm comparison, shared by the two-arm analysis
(:mod:`seqtest.monitoring.analysis`) and the comparisons of an experiment
(:mod:`seqtest.monitoring.experiment`)."""

from __future__ import annotations

from dataclasses import dataclass

from seqtest.core.vocabulary import Decision

__all__ = ["LookResult"]


@dataclass(frozen=True)
class LookResult:
    """Everything computed at one look (see :func:`analyze`).

    Attributes
    ----------
    look : int
        1-based number of the look.
    n_control, n_treatment : float
        Units per arm (exposure for rates).
    control_value, treatment_value : float
        Each arm's mean (a rate for binary and rate metrics).
    estimate : float
        The effect on its reported scale (difference, or relative lift).
    test_estimate, se, z : float
        The estimate, its standard error and the z statistic on the scale the test
        runs on (:attr:`Analysis.test_scale`): ``z = test_estimate / se`` for continuous
        metrics; for binary and rate metrics ``se`` is restricted to the null and ``z``
        is ``test_estimate / se`` with the skewness correction, the number that solves
        ``z + skewness (z^2 - 1) / 6 = test_estimate / se`` (Gart and Nam).
    skewness : float
        Skewness of the score contrast under the null (0 for continuous metrics).
    information, information_fraction : float
        ``1 / se^2``, and the fraction of the maximum reached (by sample, by
        information, or for a mixture plan the larger arm against its cap).
    efficacy_z, futility_z : float, float or None
        Boundaries on the z scale of the test at this look (a one-sided plan where
        lower is better stops for efficacy when ``z`` falls to ``efficacy_z``, which is
        then negative, and for futility when it stays above ``futility_z``).
    p_threshold : float
        The p-value this look had to reach to stop for efficacy (the efficacy boundary
        on the p scale; for a mixture plan, alpha for the always-valid p-value).
    unadjusted_p : float
        The look's own fixed-sample p-value, which ignores the looks.
    interval_lower, interval_upper : float
        Interval valid at every look on the reported scale: the repeated confidence
        interval (group-sequential plans) or the confidence sequence (mixture plans).
    decision : Decision
        This look's own decision.
    srm_p_value : float or None
        p-value of the sample-ratio check (None for rates).
    always_valid_p : float or None
        Mixture plans: the always-valid p-value.
    small_sample : bool
        An arm is below the counts where the normal approximation is reliable.
    """

    look: int
    n_control: float
    n_treatment: float
    control_value: float
    treatment_value: float
    estimate: float
    test_estimate: float
    se: float
    z: float
    skewness: float
    information: float
    information_fraction: float
    efficacy_z: float
    futility_z: float | None
    p_threshold: float
    unadjusted_p: float
    interval_lower: float
    interval_upper: float
    decision: Decision
    srm_p_value: float | None
    always_valid_p: float | None = None
    small_sample: bool = False

    # names of the first release, kept for Python callers
    @property
    def rci_lower(self) -> float:
        return self.interval_lower

    @property
    def rci_upper(self) -> float:
        return self.interval_upper

    @property
    def nominal_p(self) -> float:
        return self.p_threshold
