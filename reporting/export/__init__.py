"""Exporters: the analysis record (JSON) and, in later modules, FHIR and tables."""
