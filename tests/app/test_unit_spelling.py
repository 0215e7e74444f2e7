"""µS/cm is written one way on the tablet's pickers; "uS/cm" (the spelling of a keyboard without µ)
stays accepted where it is typed and read from older files (SI unit symbols, BIPM SI Brochure:
the prefix micro is µ)."""

from __future__ import annotations

import json

from core.science.conductivity import CONDUCTIVITY_UNITS
from mobile.app.device_files import APP_PREFS_FILE, read_local_prefs


def test_an_older_prefs_file_reads_as_micro_siemens(tmp_path):
    (tmp_path / APP_PREFS_FILE).write_text(json.dumps({"cond_unit": "uS/cm", "temp_unit": "F"}))
    prefs = read_local_prefs(tmp_path)
    assert prefs.cond_unit == "µS/cm" and prefs.temp_unit == "F"


def test_new_device_defaults_to_micro_siemens(tmp_path):
    assert read_local_prefs(tmp_path).cond_unit == "µS/cm"
    assert "uS/cm" in CONDUCTIVITY_UNITS  # still typed and read everywhere
