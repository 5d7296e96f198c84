"""Dust: interstellar extinction laws, grain optical constants, Mie tables, the veil.

Importing this package is cheap: ``dust_extinction`` and ``miepython`` are imported
on first use (``miepython`` with its pure-numpy backend, see :mod:`teffmc.dust.mie`).
"""

from teffmc.dust.extinction import LAWS, ExtinctionTable, extinction_curve
from teffmc.dust.materials import MATERIALS, ConstantIndex, Material, Sellmeier, get_material
from teffmc.dust.mie import efficiencies, grain_optics
from teffmc.dust.mietable import MieTable
from teffmc.dust.veil import VEIL_KINDS, Veil, forward_fraction

__all__ = [
    "LAWS",
    "MATERIALS",
    "VEIL_KINDS",
    "ConstantIndex",
    "ExtinctionTable",
    "Material",
    "MieTable",
    "Sellmeier",
    "Veil",
    "efficiencies",
    "extinction_curve",
    "forward_fraction",
    "get_material",
    "grain_optics",
]
