"""The modeling engine: a JSON model spec and its data compiled to a log density with gradients."""

from .model import CompiledModel
from .spec_checks import check_model, compile_model

__all__ = ["CompiledModel", "check_model", "compile_model"]
