"""Tests of the FHIR adapter (service/fhir), one module per module."""
