"""Kinematics: Lorentz transformations and the worldlines of rigid bodies (motion kinds).

The lowest layer of relview: it imports nothing from the rest of the package.
"""
