"""FHIR code sets the FHIR adapter checks itself, and the FHIR-only URLs it reads.

Everything a code *means* (LOINC, SNOMED CT, device and specimen codes) is adapter-neutral and
lives in ``service.terminology.codes``; what is here belongs to FHIR resources alone.
"""

from __future__ import annotations

DATA_ABSENT_REASON = "http://terminology.hl7.org/CodeSystem/data-absent-reason"
TEST_DATA_TAG_SYSTEM = "http://terminology.hl7.org/CodeSystem/v3-ActReason"
TEST_DATA_TAG_CODE = "HTEST"
US_CORE_PULSE_OXIMETRY = "http://hl7.org/fhir/us/core/StructureDefinition/us-core-pulse-oximetry"


# --- FHIR required-binding code sets the adapter checks itself --------------------------------
# fhir.resources does not check required bindings (FHIR R4: bindings of strength "required").

OBSERVATION_STATUS_USED = frozenset({"final", "amended", "corrected", "preliminary"})
# registered: no result yet; unknown: the sender cannot say whether the value stands.
OBSERVATION_STATUS_IGNORED = frozenset({"entered-in-error", "cancelled", "registered", "unknown"})
OBSERVATION_STATUSES = OBSERVATION_STATUS_USED | OBSERVATION_STATUS_IGNORED

BUNDLE_TYPES = frozenset(
    {
        "document",
        "message",
        "transaction",
        "transaction-response",
        "batch",
        "batch-response",
        "history",
        "searchset",
        "collection",
        "subscription-notification",  # R4B
    }
)

ADMINISTRATIVE_GENDERS = frozenset({"male", "female", "other", "unknown"})

QUANTITY_COMPARATORS = frozenset({"<", "<=", ">=", ">", "ad"})


# Every resource type of FHIR R4B (4.3.0), as listed by its resource index. A message may name a
# resource type sent only when it is one of these: a type is the sender's text, and an error
# names elements, never what they hold (checked against fhir.resources in
# tests/fhir/test_codes.py).
RESOURCE_TYPES = frozenset(
    {
        "Account",
        "ActivityDefinition",
        "AdministrableProductDefinition",
        "AdverseEvent",
        "AllergyIntolerance",
        "Appointment",
        "AppointmentResponse",
        "AuditEvent",
        "Basic",
        "Binary",
        "BiologicallyDerivedProduct",
        "BodyStructure",
        "Bundle",
        "CapabilityStatement",
        "CarePlan",
        "CareTeam",
        "CatalogEntry",
        "ChargeItem",
        "ChargeItemDefinition",
        "Citation",
        "Claim",
        "ClaimResponse",
        "ClinicalImpression",
        "ClinicalUseDefinition",
        "CodeSystem",
        "Communication",
        "CommunicationRequest",
        "CompartmentDefinition",
        "Composition",
        "ConceptMap",
        "Condition",
        "Consent",
        "Contract",
        "Coverage",
        "CoverageEligibilityRequest",
        "CoverageEligibilityResponse",
        "DetectedIssue",
        "Device",
        "DeviceDefinition",
        "DeviceMetric",
        "DeviceRequest",
        "DeviceUseStatement",
        "DiagnosticReport",
        "DocumentManifest",
        "DocumentReference",
        "Encounter",
        "Endpoint",
        "EnrollmentRequest",
        "EnrollmentResponse",
        "EpisodeOfCare",
        "EventDefinition",
        "Evidence",
        "EvidenceReport",
        "EvidenceVariable",
        "ExampleScenario",
        "ExplanationOfBenefit",
        "FamilyMemberHistory",
        "Flag",
        "Goal",
        "GraphDefinition",
        "Group",
        "GuidanceResponse",
        "HealthcareService",
        "ImagingStudy",
        "Immunization",
        "ImmunizationEvaluation",
        "ImmunizationRecommendation",
        "ImplementationGuide",
        "Ingredient",
        "InsurancePlan",
        "Invoice",
        "Library",
        "Linkage",
        "List",
        "Location",
        "ManufacturedItemDefinition",
        "Measure",
        "MeasureReport",
        "Media",
        "Medication",
        "MedicationAdministration",
        "MedicationDispense",
        "MedicationKnowledge",
        "MedicationRequest",
        "MedicationStatement",
        "MedicinalProductDefinition",
        "MessageDefinition",
        "MessageHeader",
        "MolecularSequence",
        "NamingSystem",
        "NutritionOrder",
        "NutritionProduct",
        "Observation",
        "ObservationDefinition",
        "OperationDefinition",
        "OperationOutcome",
        "Organization",
        "OrganizationAffiliation",
        "PackagedProductDefinition",
        "Parameters",
        "Patient",
        "PaymentNotice",
        "PaymentReconciliation",
        "Person",
        "PlanDefinition",
        "Practitioner",
        "PractitionerRole",
        "Procedure",
        "Provenance",
        "Questionnaire",
        "QuestionnaireResponse",
        "RegulatedAuthorization",
        "RelatedPerson",
        "RequestGroup",
        "ResearchDefinition",
        "ResearchElementDefinition",
        "ResearchStudy",
        "ResearchSubject",
        "RiskAssessment",
        "Schedule",
        "SearchParameter",
        "ServiceRequest",
        "Slot",
        "Specimen",
        "SpecimenDefinition",
        "StructureDefinition",
        "StructureMap",
        "Subscription",
        "SubscriptionStatus",
        "SubscriptionTopic",
        "Substance",
        "SubstanceDefinition",
        "SupplyDelivery",
        "SupplyRequest",
        "Task",
        "TerminologyCapabilities",
        "TestReport",
        "TestScript",
        "ValueSet",
        "VerificationResult",
        "VisionPrescription",
    }
)
