"""Published JSON Schemas of swimlab's files (data only; see docs/bundle_format.md)."""
