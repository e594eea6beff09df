"""marl-core: train small teams of learning agents on social-dilemma games, on a laptop CPU.

The games live in the sibling package :mod:`envs`; this package holds the command line and, as it grows,
the learners, the training loop and the ablation harness.
"""

__version__ = "0.1.0"
__all__ = ["__version__"]
