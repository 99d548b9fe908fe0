"""The output wing: what a person or a program reads.

Table layouts (:mod:`.tables`), text, CSV and JSON (:mod:`.formatting`), figures
(:mod:`.plots`), design-review reports (:mod:`.report`), atomic file writing
(:mod:`.files`), escaping per medium (:mod:`.escaping`) and provenance
(:mod:`.provenance`).  May import every wing below it.
"""
