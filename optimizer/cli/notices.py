"""The cautions for command-line modules; the texts live in ``optimizer/notices.py``
(below the report layer, which prints them on its pages too)."""
from ..notices import MODEL_ONLY, SAFETY

__all__ = ["MODEL_ONLY", "SAFETY"]
