"""Objective terms, one small module each (a functional form and a thin class
over it). Every term is called with one :class:`TermInputs` and returns a
scalar tensor; the objective is the sum of the terms weighted by
``objective.<name>`` (0 disables a term). A term is known by its YAML,
``conf/terms/<name>.yaml``, whose ``_target_`` names the class: nothing here
lists the terms."""
from .base import Term, TermInputs

__all__ = ["Term", "TermInputs"]
