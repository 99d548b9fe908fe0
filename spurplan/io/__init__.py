"""The input wing: every reader of a user's or a shipped file.

Lineup TOML (:mod:`.lineup_file`), rule and band files (:mod:`.mask_files`),
Touchstone files read as data (:mod:`.touchstone`), the bundled files
(:mod:`.resources`) and the style-preserving lineup editor (:mod:`.lineup_edit`).
Validation happens here, at the boundary; depends on the model wing only.
"""
