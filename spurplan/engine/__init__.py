"""The engine wing: every product at every stage.

Mixing vectors, frequencies and labels (:mod:`.products`), the torus spectral engine
(:mod:`.torus`), linear sections cascaded with full S-parameters (:mod:`.sections`),
and :class:`~.result.Result` with its node tables (:mod:`.node_table`).  Depends on
the model wing only.
"""
