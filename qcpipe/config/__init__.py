"""Configuration: station register, logger layouts, rule sets, workspace."""

from .layouts import Layout, LoadedLayouts, load_layouts
from .register import Deployment, Instrument, LoadedRegister, Station, load_register
from .rules import RuleSet, VariableRules, load_rules
from .workspace import Workspace, load_workspace

__all__ = ["Layout", "LoadedLayouts", "load_layouts", "Deployment", "Instrument", "LoadedRegister",
           "Station", "load_register", "RuleSet", "VariableRules", "load_rules", "Workspace", "load_workspace"]
