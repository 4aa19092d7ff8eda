"""Bulk assessment of FHIR Bulk Data exports (``oxyrule bulk``).

A Bulk Data export is one NDJSON file per resource type, millions of Observations in no order
of patient. The job reads every line (``export``, ``records``), groups the resources by patient
(an engine's shuffle: ``local`` on one machine, ``spark`` on a cluster), builds the gas episodes
of each patient as ordinary FHIR Bundles (``episodes``) and assesses them with the service's own
reader and assessment (``patient``); ``rows`` turns each assessment into a Parquet row, and
``summary`` and ``report`` count and chart them. Bad data never stops the job: every line or
episode that cannot be used becomes a row of ``errors/`` that names its file and line.

Only ``local``, ``spark`` and ``report`` write anything; the rest are functions of their input.
Decision support for qualified clinicians, not a diagnosis: the caution is carried in the
summary and README like in every result.
"""
