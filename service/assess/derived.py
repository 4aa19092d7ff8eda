"""The derived-fact table of the service: every concern's entries, in dependency order.

Adding a derived fact is one entry and one pure function in the module of its concern
(``sources``, ``gas_exchange``, ``oximetry``, ``normals``, ``deficit``, ``admixture``,
``acid_base``); the catalogue
(``service.assess.catalogue``) and the derivation (``service.assess.derive``) read it here.
"""

from __future__ import annotations

from . import acid_base, admixture, deficit, gas_exchange, normals, oximetry, sources
from .derivation import DerivedFact

DERIVED_FACTS: tuple[DerivedFact, ...] = (
    *sources.FACTS,
    *gas_exchange.FACTS,
    *oximetry.FACTS,
    *normals.FACTS,
    *deficit.FACTS,
    *admixture.FACTS,
    *acid_base.FACTS,
)
