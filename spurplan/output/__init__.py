"""The output wing: what a person or a program reads.

Table layouts (:mod:`.tables`), text, CSV and JSON (:mod:`.formatting`), the
machine-readable document of every result (:mod:`.documents`), what the terminal
shows of it (:mod:`.terminal`), the verdict sentences (:mod:`.verdicts`), figures
(:mod:`.plots`), design-review reports (:mod:`.report`), atomic file writing
(:mod:`.files`) and the remedy's edited lineup file (:mod:`.remedy_file`), escaping per
medium (:mod:`.escaping`) and provenance (:mod:`.provenance`).  May import every wing
below it.  The wings below reach it only through a result's ``.plot()`` (and a check's
notebook view), imported on use: the one upward door (tests/test_layers.py).
"""
