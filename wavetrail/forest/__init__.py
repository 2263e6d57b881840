"""Moderator forests: SEM trees and forests over the latent growth model.

Public surface (DESIGN 2.3): :func:`grow_tree`, :func:`grow_forest`,
:class:`Tree`, :class:`Forest`. See docs/methods/forest.md for the methods.
"""

from wavetrail.forest.forest import Forest, grow_forest, grow_tree
from wavetrail.forest.tree import Tree

__all__ = ["grow_tree", "grow_forest", "Tree", "Forest"]
