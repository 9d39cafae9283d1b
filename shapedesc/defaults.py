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

# --------------------------------------------------------------------------- stats
#: Default number of permutations for permutation tests.
DEFAULT_PERMUTATIONS: int = 5000
