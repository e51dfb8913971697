"""``python -m kinematic_monitor`` runs the command line."""

import sys

from kinematic_monitor.apps.cli import main

sys.exit(main())
