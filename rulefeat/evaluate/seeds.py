"""One seed tree per evaluation, with named children.

``incremental_value`` and ``diagnose`` draw every random choice from the same tree, so with the same
``random_state`` they use the same splits, model seeds and feature seeds.  A child is looked up by name; its
position in :data:`CHILDREN` is fixed forever (a new child goes at the end), because a child's seed depends on
its position.
"""

from __future__ import annotations

import numpy as np

from ..errors import EvaluationError

__all__ = ["CHILDREN", "Seeds", "as_int"]

#: The children of the root seed, in spawn order (append only: the position fixes each child's stream).
CHILDREN = ("splits", "model", "features", "boot", "curve", "shap")


def as_int(seq: np.random.SeedSequence) -> int:
    """A seed below 2**31 drawn from ``seq``, accepted by every library."""
    return int(seq.generate_state(1, dtype=np.uint32)[0] >> 1)


class Seeds:
    """Independent seeds for splits, model, features, bootstrap, learning curve and SHAP samples."""

    def __init__(self, random_state, repeats: int, where: str):
        if random_state is not None and (isinstance(random_state, bool) or not isinstance(
                random_state, (int, np.integer)) or random_state < 0):
            raise EvaluationError(f"The 'random_state' parameter of {where} must be None or a non-negative int. "
                                  f"Got {random_state!r} instead.")
        root = np.random.SeedSequence(random_state)
        self.entropy = root.entropy
        child = dict(zip(CHILDREN, root.spawn(len(CHILDREN)), strict=True))
        self.splits = [as_int(s) for s in child["splits"].spawn(repeats)]
        self.model, self.features, self.boot = as_int(child["model"]), as_int(child["features"]), as_int(child["boot"])
        self._curve, self._shap = child["curve"], child["shap"]

    def curve(self, n: int) -> list[int]:
        """Seeds of the learning curve's ``n`` sizes."""
        return [as_int(s) for s in self._curve.spawn(n)]

    def shap(self, n: int) -> list[int]:
        """Seeds of the SHAP samples of ``n`` folds."""
        return [as_int(s) for s in self._shap.spawn(n)]
