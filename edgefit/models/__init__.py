"""Layer 3: model components and their composition.

Importing this package imports the component modules so that every
component class is registered in :data:`COMPONENTS` (the configuration
parser and the generic tests look components up there).
"""
from .base import (ADDITIVE, COMPONENTS, MULTIPLICATIVE, Component, CompositeModel,
                   EnergyGrid, ModelNode, Param)
from .continuum import (BlackbodyPhotons, LineGaussian, MulticolourDisk, PhotonPowerLaw,
                        ThermalBrems)
from .absorption import GasEdge, IonLines, SmoothISM
from .dust import DustEdge
from .columns import ElementColumns, TotalAndFraction
from .multi_edge import MultiEdgeDust, tied_edge_model

__all__ = ["ADDITIVE", "COMPONENTS", "MULTIPLICATIVE", "Component", "CompositeModel",
           "EnergyGrid", "ModelNode", "Param",
           "PhotonPowerLaw", "MulticolourDisk", "BlackbodyPhotons", "ThermalBrems",
           "LineGaussian", "SmoothISM", "GasEdge", "IonLines", "DustEdge",
           "ElementColumns", "TotalAndFraction", "MultiEdgeDust", "tied_edge_model"]
