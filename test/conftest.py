"""Shared test set-up: DDS traffic stays on this machine, one domain per run."""

from __future__ import annotations

import os

# Discovery never leaves the machine, and parallel runs never hear each other.
os.environ["ROS_AUTOMATIC_DISCOVERY_RANGE"] = "LOCALHOST"
os.environ.setdefault("ROS_DOMAIN_ID", str(1 + os.getpid() % 101))
