"""Suite-wide settings. The many small runs of the suite write no page screenshot (starting a
browser costs seconds each); tests/test_demo.py turns it on for the demo run and checks it."""

import os

os.environ.setdefault("TOPOLOGY_SCREENSHOT", "0")
