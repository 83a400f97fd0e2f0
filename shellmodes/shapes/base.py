"""The shape interface and its registry.

A :class:`Shape` provides
- ``reference(subdivisions)``: a flat reference triangulation (points (N, 3),
  triangles (M, 3));
- ``project(points)``: the exact map from reference positions to the surface,
  applied to every geometry node of the curved mesh;
- ``snap(points)``: a map from arbitrary physical points near the surface onto
  it (used to snap imported meshes);
- ``subdivisions_for(edge_length)``: the refinement that reaches an edge length.
"""

from __future__ import annotations

import abc

import numpy as np

__all__ = ["Shape", "SHAPES", "register"]

SHAPES: dict[str, type[Shape]] = {}


def register(cls):
    """Class decorator: make a shape available under ``cls.name``."""
    SHAPES[cls.name] = cls
    return cls


class Shape(abc.ABC):
    """Base class; subclasses set ``name`` and implement ``reference`` and ``project``."""

    name = "shape"
    closed = True
    #: genus-0 closed surfaces get parent-l labels from the sphere's ladder
    sphere_like = True
    #: reference edge length at zero subdivisions, in the shape's length unit
    base_edge = 1.0

    @abc.abstractmethod
    def reference(self, subdivisions: int) -> tuple[np.ndarray, np.ndarray]:
        """Flat reference points (N, 3) and triangles (M, 3) after ``subdivisions`` halvings."""

    @abc.abstractmethod
    def project(self, points: np.ndarray) -> np.ndarray:
        """Exact map of reference positions (K, 3) onto the surface (K, 3)."""

    def snap(self, points: np.ndarray) -> np.ndarray:
        return self.project(points)

    def unwrap(self, corners: np.ndarray) -> np.ndarray:
        """Make per-element corner coordinates (3, Nel, 3) contiguous (periodic charts)."""
        return corners

    def exact_area(self) -> float | None:
        return None

    def subdivisions_for(self, edge_length: float) -> int:
        return max(0, int(np.ceil(np.log2(self.base_edge / edge_length) - 1e-9)))

    @property
    def center(self) -> np.ndarray:
        return np.zeros(3)

    def parameters(self) -> dict:
        return {"shape": self.name}

    def __repr__(self) -> str:
        inner = ", ".join(f"{k}={v!r}" for k, v in self.parameters().items() if k != "shape")
        return f"{type(self).__name__}({inner})"
