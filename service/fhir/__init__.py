"""The FHIR adapter: reads an input Bundle into the FHIR-agnostic ``Intake``.

``read_bundle`` (extract.py) is the entry point; ``codes.py`` is the one table of codes it
reads; ``outcome.py`` holds ``BundleError`` and the OperationOutcome builder; ``concept_map.py``
reads a site's local-code ConceptMap. Only ``models.py`` touches ``fhir.resources``, lazily.
"""
