"""Batch and series-statistics defaults, each with its source.

Units: speeds mm/s, restitution dimensionless.
"""
from __future__ import annotations

#: Video container extensions we look for (lower case, without the dot). Common
#: practice: the containers FFmpeg/OpenCV read on desktop systems.
VIDEO_EXTENSIONS: frozenset[str] = frozenset(
    {
        "mp4", "m4v", "mov", "qt", "avi", "mkv", "webm", "wmv", "asf", "flv",
        "mpg", "mpeg", "mpe", "m2v", "ts", "mts", "m2ts", "3gp", "3g2", "ogv",
        "mxf", "dv", "vob", "y4m",
    }
)

#: Confidence level for every interval in the series statistics (common practice).
CONFIDENCE: float = 0.95

#: Modified z-score threshold for flagging outliers, with z = 0.6745 (x - median) / MAD.
#: Iglewicz & Hoaglin, "How to Detect and Handle Outliers", ASQC Basic References in
#: Quality Control vol. 16 (1993): |z| > 3.5 flags a potential outlier.
ROBUST_Z_LIMIT: float = 3.5
#: 0.6745 = Phi^-1(0.75): makes MAD a consistent estimate of a normal sigma (same source).
MAD_TO_Z: float = 0.6745
#: When MAD is 0 (over half the values identical) we scale the mean absolute deviation
#: by sqrt(pi/2) = 1.2533 instead (normal-theory ratio of sigma to mean absolute
#: deviation; from memory as the usual fallback for the modified z-score).
MEANAD_SCALE: float = 1.253314

#: A clip whose worker process died is retried this many times before it is listed in
#: failures.csv (a clip that crashes the decoder every time must not stop the batch).
WORKER_DEATH_RETRIES: int = 1

#: How long to try reaching a dask scheduler before giving up, s (our choice: long enough
#: for a scheduler across a LAN, short enough that a wrong address fails fast).
SCHEDULER_CONNECT_TIMEOUT_S: float = 10.0

#: Minimum contacts for a series estimate; below this the statistics are reported as
#: NaN (a t-interval needs n >= 2; a line fit with a band needs n >= 3).
MIN_N_MEAN: int = 2
MIN_N_LINE: int = 3

