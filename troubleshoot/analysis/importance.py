"""Importance measures of every root event of a fault tree.

For a root event x with prior p, and P = P(top), P1 = P(top | x failed),
P0 = P(top | x works), all exact (from the BDD):

========================  =====================================
Birnbaum                  P1 - P0
criticality               (P1 - P0) * p / P
Fussell-Vesely            (P - P0) / P   (the exact form, not the cut-set sum)
risk achievement worth    P1 / P
risk reduction worth      P / P0         (infinite when P0 = 0)
diagnostic importance     p * P1 / P  =  P(x failed | top)
========================  =====================================

A measure with P = 0 in its denominator is undefined and given as NaN; a risk
reduction worth with P0 = 0 < P is ``math.inf``. Showing them (text, JSON) is
the caller's business.

References
----------
Z. W. Birnbaum, "On the importance of different components in a multicomponent
system", in *Multivariate Analysis II*, 1969.
J. B. Fussell, "How to hand-calculate system reliability and safety
characteristics", IEEE Transactions on Reliability R-24(3), 1975.
NUREG/CR-4550 Vol. 1, *Analysis of Core Damage Frequency: Internal Events
Methodology*, U.S. NRC, 1990 (risk achievement and reduction worth).
NUREG-0492, *Fault Tree Handbook*, U.S. NRC, 1981.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from troubleshoot.analysis.bdd import FaultTreeBdd
from troubleshoot.model import Model


@dataclass(frozen=True)
class Importance:
    """The importance figures of one root event (all dimensionless).

    Attributes
    ----------
    event : str
        Root event id.
    prior : float
        Its prior failure probability p.
    top_if_failed, top_if_working : float
        P(top | event failed) and P(top | event works).
    birnbaum, fussell_vesely, criticality, raw, rrw, diagnostic : float
        The measures of the module docstring; NaN when undefined (P(top) = 0),
        ``rrw`` infinite when P(top | event works) = 0 < P(top).
    """

    event: str
    prior: float
    top_if_failed: float
    top_if_working: float
    birnbaum: float
    fussell_vesely: float
    criticality: float
    raw: float
    rrw: float
    diagnostic: float


def _ratio(numerator: float, denominator: float) -> float:
    if denominator > 0.0:
        return numerator / denominator
    if numerator > 0.0:
        return math.inf
    return math.nan


def importance_measures(model: Model, *, bdd: FaultTreeBdd | None = None) -> dict[str, Importance]:
    """Importance measures of every root event of ``model`` (``model.hypotheses``).

    Parameters
    ----------
    model : Model
        The model; unlisted-cause events count as root events.
    bdd : FaultTreeBdd, optional
        The top event's BDD, if already built.

    Returns
    -------
    dict of str to Importance
        In ``model.hypotheses`` order. A root the top does not depend on has
        Birnbaum 0, RAW = RRW = 1.

    Notes
    -----
    P(top), P(top | x failed) and P(top | x works) are all exact BDD
    probabilities; Fussell-Vesely is the exact form (P - P0) / P, which equals
    the cut-set form (probability of the union of the cut sets holding x,
    over P) for a coherent tree.

    References
    ----------
    Birnbaum 1969; Fussell 1975; NUREG/CR-4550 Vol. 1, 1990; NUREG-0492, 1981.
    """
    if bdd is None:
        bdd = FaultTreeBdd.from_model(model)
    top = bdd.probability()
    failed, working = bdd.conditional_probabilities()
    measures: dict[str, Importance] = {}
    for root_id in model.hypotheses:
        p = model.prior_of(root_id)
        p1, p0 = failed[root_id], working[root_id]
        birnbaum = p1 - p0
        measures[root_id] = Importance(
            event=root_id,
            prior=p,
            top_if_failed=p1,
            top_if_working=p0,
            birnbaum=birnbaum,
            fussell_vesely=_ratio(top - p0, top) if top > 0.0 else math.nan,
            criticality=_ratio(birnbaum * p, top) if top > 0.0 else math.nan,
            raw=_ratio(p1, top) if top > 0.0 else math.nan,
            rrw=_ratio(top, p0) if top > 0.0 else math.nan,
            diagnostic=_ratio(p * p1, top) if top > 0.0 else math.nan,
        )
    return measures
