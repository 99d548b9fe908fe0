"""The model wing: what a lineup is, before anything is computed.

Memoryless transfer models (:mod:`.nonlinear`), ladder networks and tabulated
S-parameters (:mod:`.ladders`), limit rules and protected bands (:mod:`.masks`),
one module per stage kind (:mod:`.stages`), and :class:`~.lineup.Lineup`, the object
users hold.  Depends only on the package's foundation (``errors``, ``units``,
``fields``, ``notices``).
"""
