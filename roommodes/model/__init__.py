"""What the room and the system are: the box, its walls and materials, the speakers and
their own roll-off, the standard layouts, the room's modes and the room criteria.

Nothing here computes a sound field; the solvers below do (:mod:`roommodes.solvers`).
"""
