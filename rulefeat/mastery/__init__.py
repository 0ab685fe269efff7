"""Bayesian Knowledge Tracing, usable on its own: ``from rulefeat.mastery import BKT``.

The code lives in :mod:`rulefeat.mined.mastery`, beside the mined features that use it.
"""

from ..mined.mastery import BKT, BKTParams, MasteryTrace

__all__ = ["BKT", "BKTParams", "MasteryTrace"]
