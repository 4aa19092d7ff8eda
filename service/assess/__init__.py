"""The assess path: intake → paired gases → facts → rule engine → an Assessment.

FHIR-agnostic: adapters build the ``Intake`` and render the ``Assessment``.
"""
