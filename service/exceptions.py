"""The service's error family, in one place.

Most errors a caller can see descend from ``ServiceError``; a few stand outside it on purpose.
Every error class of the service is drawn here with its real bases (module in the right
column); ``tests/test_exceptions.py`` checks the drawing against the classes::

    ServiceError (Exception)                  service.exceptions
    ├── PhysiologyError (ValueError)          service.exceptions
    │   ├── ImpossibleValueError              service.exceptions
    │   └── OutsideModelRangeError            service.exceptions
    ├── UnitError (ValueError)                service.exceptions
    ├── LocatedError                          service.fhir.outcome
    │   ├── BundleError                       service.fhir.outcome
    │   │   ├── NotABundleError               service.fhir.outcome
    │   │   └── TooLargeError                 service.fhir.outcome
    │   ├── ConceptMapError                   service.fhir.outcome
    │   └── InvalidResourceError              service.fhir.models
    ├── SiteFileError                         service.site
    ├── CdsError                              service.cds.errors
    ├── CdsConfigError (ValueError)           service.cds.errors
    ├── BulkLimitError                        service.bulk.settings
    ├── RuleSetRefused                        service.workbench.lint
    └── V2MessageError                        service.hl7v2.errors
        ├── MessageRejected                   service.hl7v2.errors
        └── MessageInError                    service.hl7v2.errors

    Outside the family:
    RuleSetError (Exception)                  service.engine.errors
    FactError (ValueError)                    service.engine.errors
    ApiError (Exception)                      service.api.errors
    AuthConfigError (ValueError)              service.api.auth
    StartupError (Exception)                  service.api.server
    FixtureError (ValueError)                 service.workbench.expectations
    FetchError (Exception)                    service.cds.fetch
    KeySetError (Exception)                   service.cds.jwks
    MemoryFull (Exception)                    service.cds.replay
    ExportError (Exception)                   service.bulk.export
    OutputExistsError (Exception)             service.bulk.output
    RuleSetMismatchError (RuntimeError)       service.bulk.patient
    PseudonymKeyError (ValueError)            service.bulk.pseudonym
    CaseInputError (ValueError)               service.workbench.case_input
    WhatIfError (ValueError)                  service.workbench.whatif
    BenchError (ValueError)                   service.workbench.bench
    NotWritable (ValueError)                  service.fhir.intake_bundle

The engine's errors stand outside because the engine imports nothing of the service (it is
usable on its own); ``ApiError`` is an HTTP refusal carried to the exception handler, not a
fault; ``AuthConfigError``, ``StartupError`` and ``FixtureError`` are start-up and tooling
errors reported to an operator. The CDS Hooks adapter's ``FetchError``, ``KeySetError`` and
``MemoryFull`` are caught inside it and turned into its own answers (412, 401); the bulk job's
errors stop a job before it writes anything and are reported by its command;
``CaseInputError``, ``WhatIfError``, ``BenchError`` and ``NotWritable`` are the rule owner's
tools' (``explain``, the bench), each turned into a located message or a 422 by its surface.

The physiology package raises only ``PhysiologyError`` and ``UnitError``; adapters (FHIR,
HL7 v2, HTTP) catch them and turn them into located OperationOutcome issues. Messages say
what was wrong and why, never more.
"""

from __future__ import annotations


class ServiceError(Exception):
    """Base of every error the service raises on purpose."""


class PhysiologyError(ServiceError, ValueError):
    """A physiology function was given input it cannot use.

    ``quantity`` names the argument (with its unit in the name), ``value`` is what was given.
    """

    def __init__(self, quantity: str, value: float, reason: str) -> None:
        self.quantity = quantity
        self.value = value
        self.reason = reason
        super().__init__(f"{quantity} = {value:g}: {reason}")

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self.quantity!r}, {self.value!r}, {self.reason!r})"


class ImpossibleValueError(PhysiologyError):
    """The value cannot occur (physically or physiologically)."""


class OutsideModelRangeError(PhysiologyError):
    """The value can occur, but the equation is not valid there."""


class UnitError(ServiceError, ValueError):
    """A unit that cannot be converted to the quantity's canonical unit."""

    def __init__(
        self, unit: str, quantity: str, accepted: tuple[str, ...], *, named: str = "the unit"
    ) -> None:
        """``named``: how the message names the unit (never the sender's text unless it is one
        of the service's own codes; ``physiology.units.unit_named``)."""
        self.unit = unit
        self.quantity = quantity
        self.accepted = accepted
        super().__init__(
            f"{named} is not a unit of {quantity}; accepted UCUM codes: {', '.join(accepted)}"
        )
