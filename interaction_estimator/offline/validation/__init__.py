"""Monte-Carlo validation of the object estimates (issue 17, item 1).

A *run* is one seeded MuJoCo simulation (scenarios.py): a robot (Marten arm or mobile, or a real
robot's published URDF: Panda, UR5, TIAGo) moves an object along a direction u with a given
motion; the estimator sees only noisy joint states and efforts, through a parameter file written
by one rule from datasheet values. Each run is cut into episodes (one object in contact) and
scored (scoring.py) for three methods side by side (methods.py): the estimator, a batch
least-squares fit of its own filter rows, and a naive recursive least squares. table.py pools
the scores into the table `make validate` prints, with issue 17's targets.

    python -m interaction_estimator.offline.validation --runs 200 --jobs 2

MuJoCo is imported lazily (inside functions): it is a test and validation dependency.
"""
