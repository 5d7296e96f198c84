"""The declaration of one model parameter."""

import math
from collections.abc import Callable
from dataclasses import dataclass

from ..priors import Prior

__all__ = ["Param"]


@dataclass(frozen=True)
class Param:
    """One parameter as its component declares it.

    ``prior`` is the default prior, or a function ``(model, grid_bounds) -> Prior`` when
    it depends on them; ``low``/``high`` the physical limits any prior must respect
    (``why`` says where they come from; ``open_low`` for a strict ``> low``);
    ``limits`` a function ``model -> (low, high, why)`` when the limits depend on the
    model variant (R_V on the extinction law, the grain radius on the optics table): the
    config check then uses its answer instead of ``low``/``high``;
    ``shared`` whether epochs share it unless the config says otherwise; ``group`` its
    dimming-budget group (``teffmc.budget``: temperature, veil, radius) or None;
    ``active`` an extra condition on the model variant beyond the component's; ``words``
    its name in plain words for the methods text (``teffmc.report.methods``);
    ``corner_rank`` its place in the corner plot (``teffmc.report.figures``: lower
    first, in steps of 10 so a new parameter can go between two; None: after the ranked
    ones, in the sampled order).
    """

    name: str
    unit: str
    label: str
    prior: Prior | Callable
    low: float = -math.inf
    high: float = math.inf
    why: str = ""
    open_low: bool = False
    limits: Callable | None = None
    shared: bool = False
    group: str | None = None
    active: Callable | None = None
    words: str = ""
    corner_rank: int | None = None

    def default_prior(self, model, grid_bounds):
        """Return the default :class:`Prior` for a model variant and the grid's bounds.

        ``grid_bounds`` is ``{axis: (low, high)}`` of the grid; only a prior declared as
        a function reads it or ``model``.
        """
        return self.prior(model, grid_bounds) if callable(self.prior) else self.prior
