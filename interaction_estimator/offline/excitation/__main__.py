"""``python -m interaction_estimator.offline.excitation``: the excitation command on its own."""
import sys

from .command import main

sys.exit(main())
