"""Writing the lineup file with a stage's fitted figures (``spurplan fit --write``).

The edit and its checks are the analysis's (:func:`spurplan.analyses.figure_fit.fitted_lineup`);
here the checked bytes are written atomically (:func:`spurplan.output.files.write_atomic`),
so that over the input itself the input is intact on any failure.
"""

from __future__ import annotations

from pathlib import Path

from spurplan.analyses.figure_fit import FigureFit, fitted_lineup
from spurplan.output.files import write_atomic


def write_fitted(fit: FigureFit, lineup, path):
    """Write the lineup file with the stage's figure keys replaced by the fitted ones.

    Parameters
    ----------
    fit : FigureFit
        A converged fit whose figures are all determined.
    lineup : Lineup
        The lineup the fit was made with, loaded from a file.
    path : str or Path
        The file to write (may be the lineup's own file).

    Returns
    -------
    EditedLineup
        What was written (``moved`` lists the rewritten data paths).
    """
    edited = fitted_lineup(fit, lineup, path)
    write_atomic(Path(path), edited.data)
    return edited
