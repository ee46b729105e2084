"""New referrals in the outlook: a monthly arrival rate, estimated, fixed or left out.

``auto`` counts the cases whose first contact falls in the year before the as-of date (or in
the whole recorded span when that is shorter) and treats them as a Poisson process: the rate is
count / months, with the exact (Garwood 1936) 95% interval
``[chi2(0.025; 2k) / 2T, chi2(0.975; 2k + 2) / 2T]`` (``T`` months, ``k`` first contacts).
Arrivals start in a stage drawn from the model's initial distribution and then move on with
the model's rates; their covariates follow the mix recorded at the first contacts of the same
year's arrivals. With parameter uncertainty the rate is drawn from Gamma(k + 1/2, T), the
Jeffreys-prior posterior of a Poisson rate.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np

from caseview.errors import InputError

DAYS_PER_MONTH = 365.25 / 12.0
WINDOW_DAYS = 365
MIN_WINDOW_DAYS = 28


@dataclass(frozen=True)
class ReferralAssumption:
    """What the outlook assumes about new referrals.

    Attributes
    ----------
    kind : str
        ``'auto'`` (estimated), ``'fixed'`` (given) or ``'none'`` (left out).
    rate_per_month : float
    lower_95, upper_95 : float or None
        Exact Poisson interval of an estimated rate.
    n_first_contacts : int or None
        First contacts counted for the estimate.
    window_start, window_end : datetime.date or None
        Days counted (both included).
    covariates : ndarray, shape (H, n_covariates)
        Covariate rows assumed for arrivals ...
    weights : ndarray, shape (H,)
        ... and their shares.
    """

    kind: str
    rate_per_month: float
    lower_95: float | None = None
    upper_95: float | None = None
    n_first_contacts: int | None = None
    window_start: dt.date | None = None
    window_end: dt.date | None = None
    covariates: np.ndarray | None = None
    weights: np.ndarray | None = None

    @property
    def rate_per_day(self) -> float:
        return self.rate_per_month / DAYS_PER_MONTH

    def describe(self) -> str:
        """One sentence stating the assumption (shown above the chart and in every output)."""
        if self.kind == "none":
            return "New referrals: left out (only the cases open on the as-of date are counted)."
        if self.kind == "fixed":
            return (f"New referrals: {self.rate_per_month:g} a month as given, starting in the model's initial "
                    "stage mix.")
        return (f"New referrals: {self.rate_per_month:.1f} a month (95% interval {self.lower_95:.1f} to "
                f"{self.upper_95:.1f}), estimated from {self.n_first_contacts} first contacts between "
                f"{self.window_start.isoformat()} and {self.window_end.isoformat()} as a Poisson rate "
                "(exact interval), starting in the model's initial stage mix.")

    def draw_rates(self, rng: np.random.Generator, n_draws: int) -> np.ndarray:
        """Rates per month for parameter draws: Gamma(k + 1/2, T) when estimated, else the rate."""
        if self.kind != "auto":
            return np.full(n_draws, self.rate_per_month)
        months = (self.window_end - self.window_start).days + 1
        months /= DAYS_PER_MONTH
        return rng.gamma(self.n_first_contacts + 0.5, 1.0 / months, size=n_draws)


def poisson_rate_interval(count: int, exposure: float) -> tuple:
    """Exact 95% interval of a Poisson rate (Garwood 1936), ``count`` events in ``exposure``."""
    from scipy.special import gammaincinv   # chi2.ppf(p, 2k) / 2 = gammaincinv(k, p), without importing scipy.stats

    lower = 0.0 if count == 0 else gammaincinv(count, 0.025) / exposure
    upper = gammaincinv(count + 1, 0.975) / exposure
    return float(lower), float(upper)


def referral_assumption(option, first_contact_day: np.ndarray, first_covariates: np.ndarray,
                        as_of_day: int, n_covariates: int) -> ReferralAssumption:
    """Turn ``--referrals auto|none|N`` into a :class:`ReferralAssumption`.

    Parameters
    ----------
    option : str or float
    first_contact_day : ndarray, shape (n_cases,)
        Day of each case's first contact (days since 1970-01-01).
    first_covariates : ndarray, shape (n_cases, n_covariates)
        Covariates recorded at each case's first contact.
    as_of_day : int
    """
    from caseview.dates import from_day

    text = str(option).strip().lower()
    zeros = np.zeros((1, n_covariates))
    if text == "none":
        return ReferralAssumption("none", 0.0, covariates=zeros, weights=np.ones(1))
    first_contact_day = np.asarray(first_contact_day, dtype=np.int64)
    first_covariates = np.asarray(first_covariates, dtype=float).reshape(-1, n_covariates)
    if text != "auto":
        try:
            rate = float(text)
        except ValueError:
            raise InputError(f"new referrals: expected auto, none or a number of new referrals a month, "
                             f"got {option!r}") from None
        if not math.isfinite(rate) or rate < 0:
            raise InputError(f"new referrals: expected a number of referrals a month >= 0, got {option!r}")
        covariates, weights = _arrival_mix(first_covariates, n_covariates)
        return ReferralAssumption("fixed", rate, covariates=covariates, weights=weights)
    if first_contact_day.size == 0:
        raise InputError("new referrals (auto): no first contacts on or before the as-of date to estimate a rate "
                         "from; give a number of referrals a month, or none")
    earliest = int(first_contact_day.min())
    days = min(WINDOW_DAYS, int(as_of_day) - earliest + 1)
    if days < MIN_WINDOW_DAYS:
        raise InputError(f"new referrals (auto): first contacts span only {days} days before the as-of date "
                         f"(at least {MIN_WINDOW_DAYS} needed); give a number of referrals a month, or none")
    start = int(as_of_day) - days + 1
    recent = (first_contact_day >= start) & (first_contact_day <= as_of_day)
    count = int(recent.sum())
    months = days / DAYS_PER_MONTH
    lower, upper = poisson_rate_interval(count, months)
    covariates, weights = _arrival_mix(first_covariates[recent] if count else first_covariates, n_covariates)
    return ReferralAssumption("auto", count / months, lower, upper, count, from_day(start), from_day(as_of_day),
                              covariates, weights)


def _arrival_mix(rows: np.ndarray, n_covariates: int) -> tuple:
    """Distinct covariate rows and their shares (all zero when there are none)."""
    if rows.shape[0] == 0:
        return np.zeros((1, n_covariates)), np.ones(1)
    distinct, counts = np.unique(rows, axis=0, return_counts=True)
    return distinct, counts / counts.sum()
