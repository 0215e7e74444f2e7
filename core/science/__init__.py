"""The science: DO saturation, salinity, pressure, temperature, calibration, Winkler, BOD5, holding times, criteria (pure)."""
