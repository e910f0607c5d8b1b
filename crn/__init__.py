"""crn: population protocols as reaction networks; mean field and exact stochastics side by side."""

from .errors import CRNError, ExpressionError, ModelError
from .model import Model, parse_model
from .network import Network, Reaction, deterministic_rates, propensities
from .protocol import Outcome, Protocol
from .translate import network_to_protocol, protocol_to_network

__all__ = [
    "CRNError",
    "ExpressionError",
    "Model",
    "ModelError",
    "Network",
    "Outcome",
    "Protocol",
    "Reaction",
    "deterministic_rates",
    "network_to_protocol",
    "parse_model",
    "propensities",
    "protocol_to_network",
]

__version__ = "0.1.0"
