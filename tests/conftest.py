"""Suite-wide test settings.

Hypothesis: no per-example deadline (this machine class is shared and noisy; speed is measured in benchmarks, not
here), and in CI (`CI` set) a fixed seed so that a clean-clone run is reproducible.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("diffdeck", deadline=None)
settings.register_profile("diffdeck-ci", deadline=None, derandomize=True, print_blob=True)
settings.load_profile("diffdeck-ci" if os.environ.get("CI") else "diffdeck")
