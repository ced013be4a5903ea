"""Layer 3: model components and their composition."""
from .base import (ADDITIVE, COMPONENTS, MULTIPLICATIVE, Component, CompositeModel,
                   EnergyGrid, ModelNode, Param)

__all__ = ["ADDITIVE", "COMPONENTS", "MULTIPLICATIVE", "Component", "CompositeModel",
           "EnergyGrid", "ModelNode", "Param"]
