"""The science (pure): DO saturation, salinity, pressure, temperature, calibration, Winkler, BOD5,
holding times and criteria."""
