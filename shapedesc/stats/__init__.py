"""Group comparison of shape descriptors and of point-wise displacements.

One concern per module, pure functions over arrays:

``design`` design matrices and contrasts from a table, with input checks ·
``glm`` OLS t/F contrasts · ``permutation`` Freedman–Lane permutations, max-statistic
FWER · ``multiple`` Benjamini–Hochberg FDR · ``effect`` Hedges' g with bootstrap
intervals · ``harmonise`` ComBat across sites · ``multivariate`` Hotelling's T² /
Pillai's trace · ``vertexwise`` normal displacements and per-vertex tests ·
``shapespace`` PCA of coefficients and cross-validated separability · ``compare`` the
per-structure comparison of a spectra table · ``study`` the ``shapedesc compare`` run
(OUTDIR in, STATSDIR out).

Research use only: group statistics, not a diagnostic device.
"""
