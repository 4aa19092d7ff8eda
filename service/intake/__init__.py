"""What the adapters (FHIR, HL7 v2) hand to the assess path: named measurements in canonical
units, each traceable to the element it came from, plus the issues met while reading them."""
