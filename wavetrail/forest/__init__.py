"""Moderator forests: SEM trees and forests over the latent growth model.

Public surface: :func:`grow_tree` (one tree) and :func:`grow_forest` (a :class:`Forest`
with ``importance()``, ``dependence()``, ``interactions()``, ``to_json()``), and the classes
:class:`Tree` and :class:`Forest`. See docs/methods/forest.md for the methods.
"""

from wavetrail.forest.forest import Forest, grow_forest, grow_tree
from wavetrail.forest.tree import Tree

__all__ = ["grow_tree", "grow_forest", "Tree", "Forest"]
