"""Tolerances and defaults: the one place for every number a user or test may ask about.

Each constant carries its unit and, where it comes from a paper, the citation.  Modules
import from here; nothing else defines a tolerance.  Sections are per module; keep each
section's constants together when you add one.
"""

from __future__ import annotations

# --------------------------------------------------------------------------- general
#: Largest number of bytes any reader will accept after decompression (bytes).
#: A gzip bomb inflating past this is refused. 2 GiB covers a 1 mm whole-head float32
#: volume many times over (common practice).
MAX_INPUT_BYTES: int = 2 * 1024**3

#: Default seed used by the CLI when the user gives none (any fixed integer works).
DEFAULT_SEED: int = 20261201

# --------------------------------------------------------------------------- harmonics
#: Default maximum degree of the shape expansion for subcortical-sized structures.
DEFAULT_DEGREE: int = 15

# --------------------------------------------------------------------------- mesh

# --------------------------------------------------------------------------- sphere

# --------------------------------------------------------------------------- descriptors
#: Nearest face centroids examined per query in point-to-mesh distances (count).
#: 16 makes the query exact on the near-uniform meshes used here (checked against a
#: brute-force search in tests/test_mesh_distance.py).
DISTANCE_CANDIDATE_FACES: int = 16

#: Scale normalisations offered for descriptors: none, cube root of the enclosed volume,
#: square root of the surface area.
SCALE_CHOICES: tuple[str, ...] = ("none", "volume", "area")
DEFAULT_SCALE: str = "volume"

#: Two first-order ellipsoid semi-axes closer than this relative difference make the
#: canonical rotation unstable (dimensionless); 5 % is common practice for the
#: first-order-ellipsoid alignment of Brechbühler et al. 1995.
POSE_AXIS_TOLERANCE: float = 0.05

#: Relative third moment below which an axis's sign is called ambiguous (dimensionless).
POSE_SKEW_TOLERANCE: float = 1e-3

#: Subdivision level of the icosahedron that the reconstructions and QC measures use
#: (level 4: 2,562 vertices; level 5: 10,242).
DEFAULT_ICOSPHERE_LEVEL: int = 4
#: Level used to measure volume/area of a fitted surface (10,242 vertices).
MEASURE_ICOSPHERE_LEVEL: int = 5

# --------------------------------------------------------------------------- stats
#: Default number of permutations for permutation tests.
DEFAULT_PERMUTATIONS: int = 5000
