"""HTTP API: one router module per resource, thin handlers over :mod:`prognosis_service.domain`."""
