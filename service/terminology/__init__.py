"""What codes mean to the service, for every adapter: LOINC, SNOMED CT, the project's own code
systems, specimen types, and a site's local codes mapped to LOINC.

Adapter-neutral: the FHIR and HL7 v2 readers both read codes through this package, and it
imports neither of them.
"""
