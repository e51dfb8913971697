"""Shared test set-up: DDS traffic stays on this machine, one domain per run.

``bench/`` is put on the import path so the tests of the detection-grading harness
(``bench/grading.py``, kept outside the installed package) can import it; this folder is
on it already, for ``dds_helpers``.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

# Discovery never leaves the machine, and parallel runs never hear each other.
os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
os.environ.setdefault("ROS_DOMAIN_ID", str(1 + os.getpid() % 101))

BENCH = str(Path(__file__).resolve().parents[1] / "bench")
if BENCH not in sys.path:
    sys.path.insert(0, BENCH)
