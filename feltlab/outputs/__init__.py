"""Writers for everything ``feltlab analyze`` leaves in ``results/<clip>/``.

One module per kind of output, each a thin I/O layer over pure functions:

* :mod:`.tables`   -- tracks / segments / contacts as CSV and Parquet (units in column names)
* :mod:`.shotfile` -- ``shot.json``: the per-shot summary, enough to reproduce the run
* :mod:`.frames`   -- annotated PNG frames at every contact and ``annotated.mp4``
* :mod:`.plots`    -- speed-time plot and the to-scale table diagram (matplotlib)
* :mod:`.report`   -- ``report.html``: one self-contained page
* :mod:`.atomic`   -- write into a temporary folder, rename into place when complete
* :mod:`.style`    -- the colour-blind-safe palette shared by frames and plots
* :mod:`.compare`  -- measured contacts against a clip's truth file (demo, benchmarks, tests)
"""
