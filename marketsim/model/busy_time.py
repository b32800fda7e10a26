"""How long a booked listing stays busy: the busy-time distribution of a listing type.

Each class fixes the *shape* of the distribution; its mean is always the
market's ``mean_busy_time`` of the listing type, so balance, the large-market
model and Little's law keep their meaning whatever the shape. Shapes are given
by the coefficient of variation ``cv`` (standard deviation over mean) or, for
:class:`Empirical`, by observed stays.

======================  =========  ==============================================
class                   cv         draw with mean ``m``
======================  =========  ==============================================
:class:`Exponential`    1          exponential of mean ``m`` (the default)
:class:`Gamma`          (0, 10]    gamma of shape ``1/cv**2``, scale ``m cv**2``
:class:`LogNormal`      (0, 10]    ``exp(mu + sigma Z)``, ``sigma**2 = log(1 + cv**2)``,
                                   ``mu = log(m) - sigma**2 / 2``
:class:`Fixed`          0          exactly ``m``
:class:`Empirical`      observed   a stay drawn uniformly from the observed ones,
                                   rescaled by ``m / mean(stays)``
======================  =========  ==============================================

The exponential is the only shape for which the count of available listings
per cell is a Markov chain; any other shape is simulated by the general engine,
which keeps each busy listing's release time (see :mod:`marketsim.engine`).

Examples
--------
>>> from marketsim.model.busy_time import LogNormal
>>> LogNormal(cv=2.0)
LogNormal(cv=2.0)
>>> LogNormal(cv=2.0).describe()
'lognormal (cv 2)'
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from marketsim import _validation as check

MAX_CV = 10.0
"""Largest coefficient of variation accepted for gamma and lognormal shapes.

Beyond it the mean is carried by stays so rare and so long that no simulation
of practical length sees their average: a run would report a market quieter
than the one described, without any sign of it.
"""


class BusyTime:
    """Base class of the busy-time shapes (not used directly).

    Every shape has ``family`` (its name in scenario files) and ``cv``, its
    coefficient of variation (standard deviation over mean).
    """

    family: str = ""
    cv: float

    def sample(self, mean: float, size: int | None,
               rng: np.random.Generator) -> np.ndarray | float:
        """``size`` busy times with mean ``mean`` (one float when ``size`` is None).

        Returns
        -------
        ndarray of float, shape (size,), or float
        """
        raise NotImplementedError

    def _length_biased(self, mean: float, size: int,
                       rng: np.random.Generator) -> np.ndarray:
        """Draws from the length-biased law (density ``x f(x) / mean``)."""
        raise NotImplementedError

    def residual_sample(self, mean: float, size: int,
                        rng: np.random.Generator) -> np.ndarray:
        """``size`` remaining busy times of listings found busy in a steady state.

        These follow the equilibrium (stationary-excess) law, density
        ``(1 - F(x)) / mean``: a listing seen busy at a random moment is more
        likely to be in a long stay (length bias), and it is at a uniform point
        of that stay. So a draw is ``U * L`` with ``U`` uniform on (0, 1) and
        ``L`` from the length-biased law. Its mean is
        ``mean * (1 + cv**2) / 2``.

        Returns
        -------
        ndarray of float, shape (size,)

        References
        ----------
        S. M. Ross, *Stochastic Processes*, 2nd ed., Wiley, 1996, section 3.4
        (the limiting distribution of the excess of a renewal process).
        """
        return rng.random(size) * self._length_biased(mean, size, rng)

    def describe(self) -> str:
        """A few words for tables, e.g. ``"lognormal (cv 2)"``."""
        return f"{self.family} (cv {self.cv:.3g})"

    def to_dict(self) -> dict:
        """The shape as plain JSON-ready data (the scenario-file format)."""
        return {"family": self.family, "cv": self.cv}


@dataclass(frozen=True)
class Exponential(BusyTime):
    """Exponential busy times (coefficient of variation 1): the Markov chain."""

    family = "exponential"

    @property
    def cv(self) -> float:
        return 1.0

    def sample(self, mean, size, rng):
        return rng.exponential(mean, size)

    def _length_biased(self, mean, size, rng):
        return rng.gamma(2.0, mean, size)

    def describe(self) -> str:
        return "exponential"

    def to_dict(self) -> dict:
        return {"family": self.family}


@dataclass(frozen=True)
class Fixed(BusyTime):
    """Every stay lasts exactly the mean (coefficient of variation 0)."""

    family = "fixed"

    @property
    def cv(self) -> float:
        return 0.0

    def sample(self, mean, size, rng):
        return float(mean) if size is None else np.full(size, float(mean))

    def _length_biased(self, mean, size, rng):
        return np.full(size, float(mean))

    def describe(self) -> str:
        return "fixed"

    def to_dict(self) -> dict:
        return {"family": self.family}


def _checked_cv(family: str, value: object) -> float:
    """A coefficient of variation the gamma and lognormal families can take."""
    cv = check.number(f"{family} cv", value)
    if not 0.0 < cv <= MAX_CV:
        hint = " (use Fixed() for cv 0)" if cv == 0.0 else ""
        raise ValueError(
            f"{family} cv must be a finite number in (0, {MAX_CV:g}]{hint}, got {value!r}"
        )
    return cv


@dataclass(frozen=True)
class Gamma(BusyTime):
    """Gamma busy times of coefficient of variation ``cv`` in (0, 10].

    ``cv = 1`` is the exponential; smaller is more regular, larger more spread.
    """

    cv: float
    family = "gamma"

    def __post_init__(self) -> None:
        object.__setattr__(self, "cv", _checked_cv("gamma", self.cv))

    @property
    def shape(self) -> float:
        """Gamma shape parameter ``1 / cv**2``."""
        return 1.0 / self.cv**2

    def sample(self, mean, size, rng):
        return rng.gamma(self.shape, mean * self.cv**2, size)

    def _length_biased(self, mean, size, rng):
        # x f(x) / mean of a gamma(k, theta) is the gamma(k + 1, theta) density
        return rng.gamma(self.shape + 1.0, mean * self.cv**2, size)


@dataclass(frozen=True)
class LogNormal(BusyTime):
    """Lognormal busy times of coefficient of variation ``cv`` in (0, 10]."""

    cv: float
    family = "lognormal"

    def __post_init__(self) -> None:
        object.__setattr__(self, "cv", _checked_cv("lognormal", self.cv))

    @property
    def sigma(self) -> float:
        """Standard deviation of the logarithm, ``sqrt(log(1 + cv**2))``."""
        return float(np.sqrt(np.log1p(self.cv**2)))

    def log_mean(self, mean: float) -> float:
        """Mean of the logarithm for busy times of mean ``mean``."""
        return float(np.log(mean) - 0.5 * self.sigma**2)

    def sample(self, mean, size, rng):
        return rng.lognormal(self.log_mean(mean), self.sigma, size)

    def _length_biased(self, mean, size, rng):
        # x f(x) / mean of a lognormal(mu, s) is the lognormal(mu + s**2, s) density
        return rng.lognormal(self.log_mean(mean) + self.sigma**2, self.sigma, size)


@dataclass(frozen=True, eq=False)
class Empirical(BusyTime):
    """Busy times resampled from observed stays (for example a calibration's).

    A draw is one of the observed stays, chosen uniformly at random, times
    ``mean_busy_time / mean(stays)``: the stays give the shape, the market's
    ``mean_busy_time`` the mean. Set ``mean_busy_time`` to :attr:`mean` to
    resample the stays exactly as observed.

    Parameters
    ----------
    stays : array_like, shape (n_stays,)
        Observed busy times; finite, >= 0, at least 2 of them, mean > 0.
    """

    stays: np.ndarray
    family = "empirical"

    def __post_init__(self) -> None:
        stays = check.array("empirical stays", self.stays, (None,), "(n_stays,)", low=0.0)
        if stays.size < 2:
            raise ValueError(
                f"empirical stays must hold at least 2 values, got {stays.size}"
            )
        if stays.mean() <= 0.0:
            raise ValueError(f"empirical stays must have a mean > 0, got a mean of "
                             f"{stays.mean():g} over {stays.size} stays (largest "
                             f"{stays.max():g})")
        object.__setattr__(self, "stays", stays)

    @property
    def mean(self) -> float:
        """Mean of the observed stays."""
        return float(self.stays.mean())

    @property
    def cv(self) -> float:
        return float(self.stays.std() / self.stays.mean())

    @property
    def relative_stays(self) -> np.ndarray:
        """The stays divided by their mean (mean 1), shape (n_stays,)."""
        return self.stays / self.stays.mean()

    def sample(self, mean, size, rng):
        return mean * self.relative_stays[rng.integers(0, self.stays.size, size)]

    def _length_biased(self, mean, size, rng):
        relative = self.relative_stays
        picked = rng.choice(relative.size, size=size, p=relative / relative.sum())
        return mean * relative[picked]

    def describe(self) -> str:
        return f"empirical ({self.stays.size} stays, cv {self.cv:.3g})"

    def to_dict(self) -> dict:
        return {"family": self.family, "stays": self.stays.tolist()}

    def __repr__(self) -> str:
        return f"Empirical({self.stays.size} stays, cv={self.cv:.3g})"


FAMILIES: dict[str, type[BusyTime]] = {
    cls.family: cls for cls in (Exponential, Gamma, LogNormal, Fixed, Empirical)
}
"""Each family's name (as in scenario files) and class."""

EXPONENTIAL = Exponential()


def per_listing_type(value: BusyTime | Sequence[BusyTime] | None,
                     n_listing_types: int) -> tuple[BusyTime, ...]:
    """The ``busy_time=`` option of :class:`~marketsim.Market`: one shape per listing type.

    Parameters
    ----------
    value : BusyTime, sequence of BusyTime or None
        One shape for every listing type, one per listing type, or ``None``
        (exponential everywhere).
    n_listing_types : int

    Returns
    -------
    tuple of BusyTime, length n_listing_types
    """
    allowed = ("busy_time must be a busy-time shape (e.g. marketsim.busy_time.LogNormal(cv=2)) "
               f"or a list of one per listing type ({n_listing_types})")
    if value is None:
        return (EXPONENTIAL,) * n_listing_types
    if isinstance(value, BusyTime):
        return (value,) * n_listing_types
    if isinstance(value, (str, bytes)) or not isinstance(value, Sequence):
        raise ValueError(f"{allowed}, got {check._shown(value)}")
    if len(value) != n_listing_types:
        raise ValueError(f"{allowed}, got a list of {len(value)}")
    for k, item in enumerate(value):
        if not isinstance(item, BusyTime):
            raise ValueError(f"{allowed}, got {check._shown(item)} at index {k}")
    return tuple(value)


def from_dict(data: object, name: str = "busy_time") -> BusyTime:
    """Read one shape from scenario-file data such as ``{"family": "gamma", "cv": 0.5}``.

    Parameters
    ----------
    data : dict
        ``family`` (one of :data:`FAMILIES`), plus ``cv`` for gamma and
        lognormal or ``stays`` for empirical.
    name : str
        Where the data sits, for error messages (e.g. ``"market.busy_time[1]"``).
    """
    families = ", ".join(repr(f) for f in FAMILIES)
    if not isinstance(data, dict) or "family" not in data:
        raise ValueError(
            f"{name} must be an object with a 'family' ({families}), got {check._shown(data)}"
        )
    family = check.choice(f"{name}.family", data["family"], tuple(FAMILIES))
    wanted = {"gamma": ("cv",), "lognormal": ("cv",), "empirical": ("stays",)}.get(family, ())
    given = sorted(set(data) - {"family"})
    if given != sorted(wanted):
        keys = ", ".join(repr(k) for k in wanted) or "no other key"
        raise ValueError(f"{name}: family {family!r} takes {keys}, got keys {given}")
    try:
        return FAMILIES[family](**{key: data[key] for key in wanted})
    except ValueError as error:
        raise ValueError(f"{name}: {error}") from None


__all__ = ["BusyTime", "Exponential", "Gamma", "LogNormal", "Fixed", "Empirical",
           "FAMILIES", "per_listing_type", "from_dict"]
