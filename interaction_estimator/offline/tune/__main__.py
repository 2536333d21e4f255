"""``python -m interaction_estimator.offline.tune``: the tune command on its own."""
import sys

from .command import main

sys.exit(main())
