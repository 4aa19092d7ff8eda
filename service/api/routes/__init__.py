"""The HTTP routes, one module per area: the operation, the conformance resources, health."""
