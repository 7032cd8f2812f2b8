"""Phylogenetic trees and Gaussian models on them, in linear time.

This package reads a Newick tree (with dendropy), matches its tips to the taxa
of a per-taxon table, and fits Brownian-motion (BM) models on the tree without
ever building the n x n covariance matrix:

* :func:`read_tree` -- Newick text or file to a ``dendropy.Tree`` (branch
  lengths required, deep trees supported);
* :func:`match_tips` -- table labels to tip labels, with both unmatched lists;
* :class:`FlatTree` -- the (pruned) tree as flat numpy arrays, nodes grouped by
  height above the tips;
* :func:`gls_quantities` -- one post-order pass giving ln|V|, 1'V⁻¹1, 1'V⁻¹Z and
  Z'V⁻¹Z (Ho & Ané 2014), vectorised by tree level;
* :func:`pgls` -- phylogenetic generalised least squares with Pagel's lambda,
  measurement error, ML or REML, and group (interaction) tests: the record that
  ``comparo.fit(..., method="pgls")`` turns into a ``FitResult`` (``phylo_fit`` is its
  deprecated old name here);
* :func:`contrasts` -- Felsenstein's independent contrasts with diagnostics;
* :func:`signal` -- Pagel's lambda and Blomberg's K with a permutation test.

Files: :mod:`.trees` (reading, checks), :mod:`.tips` (tip matching, gate checks),
:mod:`.flat` (flat arrays), :mod:`.engine` (linear-time pass), :mod:`.likelihood`
(GLS at a lambda, lambda search), :mod:`.regression` (PGLS of a line), :mod:`.independent`
(contrasts), :mod:`.signal` and :mod:`.simulate` (random trees).

Units: branch lengths are in the tree's own units (time or expected change);
the BM rate sigma² is in (trait units on the fitted scale)² per branch-length
unit. Nothing here depends on the unit of the branch lengths except sigma².

References
----------
Felsenstein J (1985) Phylogenies and the comparative method. Am Nat 125:1-15.
Grafen A (1989) The phylogenetic regression. Phil Trans R Soc B 326:119-157.
Pagel M (1999) Inferring the historical patterns of biological evolution.
Nature 401:877-884.
Freckleton RP, Harvey PH, Pagel M (2002) Phylogenetic analysis and comparative
data: a test and review of evidence. Am Nat 160:712-726.
Blomberg SP, Garland T, Ives AR (2003) Testing for phylogenetic signal in
comparative data: behavioral traits are more labile. Evolution 57:717-745.
Ives AR, Midford PE, Garland T (2007) Within-species variation and measurement
error in phylogenetic comparative methods. Syst Biol 56:252-270.
Ho LST, Ané C (2014) A linear-time algorithm for Gaussian and non-Gaussian trait
evolution models. Syst Biol 63:397-408.
"""

from __future__ import annotations

from comparo.phylo.engine import GLSQuantities, gls_quantities
from comparo.phylo.flat import FlatTree, flat_tree, pagel_edges
from comparo.phylo.independent import Contrasts, contrasts
from comparo.phylo.regression import pgls, phylo_fit
from comparo.phylo.signal import SignalResult, blomberg_k, tree_signal
from comparo.phylo.simulate import random_newick
from comparo.phylo.tips import (
    TipMatch,
    dataset_tree_labels,
    match_tips,
    nearest_tip,
    tip_labels,
    tree_problems,
)
from comparo.phylo.trees import check_tree, read_tree

__all__ = [
    "read_tree",
    "check_tree",
    "TipMatch",
    "match_tips",
    "dataset_tree_labels",
    "tip_labels",
    "nearest_tip",
    "tree_problems",
    "FlatTree",
    "flat_tree",
    "GLSQuantities",
    "gls_quantities",
    "pagel_edges",
    "pgls",
    "phylo_fit",
    "Contrasts",
    "contrasts",
    "SignalResult",
    "tree_signal",
    "blomberg_k",
    "random_newick",
]
