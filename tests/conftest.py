"""Make the test helpers in this folder (reference_ed, ...) importable by plain name."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
