"""cma's augmented Lagrangian without its analysis-only loggers.

Its constructor switches logging on and creates the loggers' folder (``outcmaes/``) in the
working directory.  The subclass turns logging off before the loggers are made.  It lives at
module level so that a pickled search state (a run's checkpoint) finds it again.
"""

from __future__ import annotations

from cma.constraints_handler import AugmentedLagrangian

__all__ = ["QuietAugmentedLagrangian"]


class QuietAugmentedLagrangian(AugmentedLagrangian):
    """:class:`cma.constraints_handler.AugmentedLagrangian` with ``logging = 0`` from the start."""

    def _init_(self):
        self.logging = 0
        super()._init_()
