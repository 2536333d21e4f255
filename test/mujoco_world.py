"""The MuJoCo ground-truth world now lives in the package
(interaction_estimator/sim/mujoco_world.py, used by the Monte-Carlo validation as well);
tests that `import mujoco_world` get that module."""
import sys

from interaction_estimator.sim import mujoco_world as _world

sys.modules[__name__] = _world
