"""Arms of a study: a design with the estimators to score on it."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from marketsim.designs import Design, listing_rounding_note
from marketsim.estimators import Estimator, default_estimators
from marketsim.model import Market


@dataclass(frozen=True, init=False)
class Arm:
    """One design of a study, with the estimators to score on it.

    Parameters
    ----------
    design : Design
        How the experiment is randomized, e.g. ``ms.TwoSided(0.5, 0.5)``.
    estimators : Estimator or sequence of Estimator, optional
        Estimators to apply to the design's ledgers. Default: the design's own
        estimators that fit it (:func:`marketsim.estimators.default_estimators`:
        customer-side for customer-side randomization, listing-side for
        listing-side, the two-sided family for two-sided),
        leaving out any whose coefficients repeat an earlier one.
    name : str, optional
        Name of the arm in tables and plots (default: the design's label).

    Examples
    --------
    >>> import marketsim as ms
    >>> ms.Arm(ms.TwoSided(0.5, 0.5), [ms.TwoSidedNaive(), ms.TwoSidedCorrected(k=1)])
    Arm(two-sided (a_C=0.5, a_L=0.5): two-sided naive, two-sided corrected (k=1))
    """

    design: Design
    estimators: tuple[Estimator, ...] | None = None
    name: str | None = None

    def __init__(
        self,
        design: Design,
        estimators: Estimator | Sequence[Estimator] | None = None,
        name: str | None = None,
    ) -> None:
        if not isinstance(design, Design):
            raise ValueError(
                "design must be a marketsim.Design (e.g. ms.CustomerSide(0.5)), "
                f"got {type(design).__name__}"
            )
        if isinstance(estimators, Estimator):
            estimators = (estimators,)
        if estimators is not None:
            if isinstance(estimators, (str, bytes)) or not isinstance(estimators, Sequence):
                raise ValueError(
                    "estimators must be a marketsim.Estimator, a list of them or None, "
                    f"got {type(estimators).__name__}"
                )
            estimators = tuple(estimators)
            if not estimators:
                raise ValueError("estimators must not be empty (use None for every "
                                 "estimator that fits the design), got []")
            for item in estimators:
                if not isinstance(item, Estimator):
                    raise ValueError(
                        "estimators must contain marketsim.Estimator objects "
                        f"(e.g. ms.CustomerSideEstimator()), got {type(item).__name__}"
                    )
            names = [item.name for item in estimators]
            for item_name in names:
                if names.count(item_name) > 1:
                    raise ValueError(
                        f"estimators must have distinct names, got {item_name!r} twice"
                    )
        if name is not None and (not isinstance(name, str) or not name.strip()):
            raise ValueError(f"name must be a non-empty string or None, got {name!r}")
        object.__setattr__(self, "design", design)
        object.__setattr__(self, "estimators", estimators)
        object.__setattr__(self, "name", name)

    @property
    def label(self) -> str:
        """Name of the arm in tables: ``name``, or the design's label."""
        return self.name if self.name is not None else self.design.label

    def resolve(self, market: Market) -> tuple[Estimator, ...]:
        """The estimators this arm scores on ``market``, checked against the design.

        Raises
        ------
        ValueError
            If an estimator does not fit the design, or no built-in one does.
        """
        if self.estimators is None:
            chosen = default_estimators(self.design, market)
            if not chosen:
                note = listing_rounding_note(self.design, market)
                reason = (f"on {market.n_listings} listings {note}" if note is not None
                          else "it must randomize customers or listings")
                raise ValueError(
                    f"arm {self.label!r} has no built-in estimator that fits its design "
                    f"{self.design!r} ({reason}); pass estimators=[...] or use another "
                    "design"
                )
            return chosen
        for estimator in self.estimators:
            try:
                estimator.fits(self.design, market)
            except ValueError as error:
                note = listing_rounding_note(self.design, market)
                raise ValueError(
                    f"arm {self.label!r}: estimator {estimator.name!r} does not fit the "
                    f"design {self.design!r}: {error}"
                    + ("" if note is None else f"; on {market.n_listings} listings {note}")
                ) from None
        return self.estimators

    def __repr__(self) -> str:
        shown = "the design's own estimators" if self.estimators is None else ", ".join(
            e.name for e in self.estimators)
        return f"Arm({self.label}: {shown})"


def arm_list(arms: object) -> tuple[Arm, ...]:
    if isinstance(arms, (Arm, Design)):
        arms = [arms]
    if isinstance(arms, (str, bytes)) or not isinstance(arms, Sequence) or len(arms) == 0:
        raise ValueError(
            "arms must be a non-empty list of ms.Arm or ms.Design "
            f"(e.g. [ms.CustomerSide(0.5), ms.ListingSide(0.5)]), got {arms!r}"
        )
    result = []
    for item in arms:
        if isinstance(item, Design):
            item = Arm(item)
        if not isinstance(item, Arm):
            raise ValueError(
                f"arms must contain ms.Arm or ms.Design objects, got {type(item).__name__}"
            )
        result.append(item)
    labels = [arm.label for arm in result]
    for label in labels:
        if labels.count(label) > 1:
            raise ValueError(
                f"arms must have distinct names, got {label!r} twice "
                "(name them: ms.Arm(design, name='...'))"
            )
    return tuple(result)


__all__ = ["Arm", "arm_list"]
