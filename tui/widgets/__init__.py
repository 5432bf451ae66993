"""The dashboard's panels; each carries its CSS beside it."""
from .classes import ClassPanel
from .confusion import ConfusionPanel
from .curve import Caution, CurvePanel
from .fit import FitPanel
from .progress import ProgressPanel
from .runbar import RunBar
from .side import SidePanel

__all__ = ["Caution", "ClassPanel", "ConfusionPanel", "CurvePanel", "FitPanel", "ProgressPanel", "RunBar",
           "SidePanel"]
