"""The rules: QC derivation of a trip's flags and the lab bench's results on trip records (pure)."""
