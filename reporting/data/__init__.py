"""Reference tables, thresholds and demo studies (see SOURCES.md)."""
