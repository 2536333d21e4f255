"""Ground-truth physics: URDF robots (our Marten, and real robots' published URDFs) in MuJoCo.

The independent ground truth of the tests and of the Monte-Carlo validation
(interaction_estimator/offline/validation). It stays independent of the estimator: MuJoCo is
the physics engine here, and nothing else from ``interaction_estimator`` is imported (the URDF is
read as a text file). MuJoCo (PyPI ``mujoco``) is a test and validation dependency, not a runtime
one: nothing the node or the replay imports imports this package. Its modules are imported
by name (this file holds only the overview):

Scenarios:

* :func:`.arm.run_applied_force` -- the arm moves along a smooth joint-space path under a
  computed-torque controller; after ``free_time`` the environment pushes on the contact frame
  with ``F_ext(t) = -force_fn(t)`` (``mj_applyFT`` at the frame's origin).
* :func:`.arm.run_attached_object` -- an object (a body on a slide joint along ``direction``, with
  MuJoCo's own spring and damper, its own mass and a constant resisting force) is attached to
  the contact frame with an equality ``connect`` constraint at ``free_time``; a task-space
  (resolved-acceleration) controller makes the tool follow ``path_fn`` along the direction.
* :class:`.object_world.ObjectWorld` -- the same object world for any URDF and a schedule of
  phases (:mod:`.schedule`: free motion, contact, object changes, release and a new object),
  recorded at a sample rate below the simulation's: the validation's runs.
* :mod:`.mechanisms` -- 3-D fixtures and a hinged door attached to the tool (the object models
  beyond one direction).

:mod:`.common` holds what they share (constants, :class:`~.common.GroundTruthRun`, the URDF
prepared for MuJoCo, the robot's MuJoCo quantities); :func:`.common.corrupt` adds sensor
imperfections to a run (noise, encoder quantization, effort bias).

Conventions (the project's DESIGN.md, section 3):

* ``true_force`` is the force the ROBOT APPLIES TO THE ENVIRONMENT, world frame (the URDF root).
* ``true_external_torque`` is the external joint torque acting on the robot,
  ``J^T F_ext`` with ``F_ext = -true_force``.
* Sample ``k`` holds the state at ``time[k]`` and the effort applied from ``time[k]`` to
  ``time[k+1]``. MuJoCo's semi-implicit Euler integrator (with the implicit Euler damping
  switched off) makes ``(velocity[k+1] - velocity[k]) / dt`` exactly the joint acceleration
  that solves ``M(q_k) qdd + bias(q_k, v_k) = effort_k + true_external_torque_k``.
* Gravity: 9.80665 m/s^2 (standard gravity, CGPM 1901) along -z.

MuJoCo specifics verified on this machine (see /work/shared/NOTES.md): the URDF loads with
``MjSpec.from_string`` after a ``<mujoco><compiler .../></mujoco>`` element is inserted inside
``<robot>``; in 4.0 joint ``damping`` and ``stiffness`` are 3-vectors.
"""
