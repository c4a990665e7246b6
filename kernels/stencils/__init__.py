"""Doubly periodic horizontal stencils applied to every variable and level."""
