"""The ``Surface`` type shared by every stage: a triangle mesh in millimetres."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np


@dataclass(frozen=True)
class Surface:
    """A triangle surface mesh with its provenance.

    Parameters
    ----------
    vertices : ndarray, shape (V, 3), float64
        Vertex coordinates in millimetres, in the space the input file declares
        (world/scanner coordinates for label volumes, via the image affine).
    faces : ndarray, shape (F, 3), int64
        Vertex indices of each triangle; counter-clockwise seen from outside once the
        surface has been validated and oriented.
    source : str
        Where the surface came from (a path, ``path#label=17``, or a generator name).
    history : tuple of str
        What was done to it, in order (``"merged 12 duplicate vertices"``, ...).
    """

    vertices: np.ndarray
    faces: np.ndarray
    source: str = "<memory>"
    history: tuple[str, ...] = field(default_factory=tuple)

    def __post_init__(self):
        v = np.ascontiguousarray(self.vertices, dtype=np.float64)
        f = np.ascontiguousarray(self.faces, dtype=np.int64)
        if v.ndim != 2 or v.shape[1] != 3:
            raise ValueError(f"{self.source}: vertices must have shape (V, 3), got {v.shape}")
        if f.ndim != 2 or f.shape[1] != 3:
            raise ValueError(f"{self.source}: faces must have shape (F, 3), got {f.shape}")
        v.setflags(write=False)
        f.setflags(write=False)
        object.__setattr__(self, "vertices", v)
        object.__setattr__(self, "faces", f)
        object.__setattr__(self, "history", tuple(self.history))

    @property
    def n_vertices(self) -> int:
        return int(self.vertices.shape[0])

    @property
    def n_faces(self) -> int:
        return int(self.faces.shape[0])

    def with_step(self, step: str, *, vertices=None, faces=None) -> "Surface":
        """Return a copy with new geometry (optional) and ``step`` appended to the history."""
        return replace(
            self,
            vertices=self.vertices if vertices is None else vertices,
            faces=self.faces if faces is None else faces,
            history=self.history + (step,),
        )
