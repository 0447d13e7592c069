"""The defaults of a test evaluation, defined once.

The Python path (``Run.screen_outliers``, ``Run.steadiest_window``, ``Run.average``,
``reconcile_many``), the ``perftest report``/``monitor`` commands and the demo all take
their default settings from here, so the README's code and the command line give the
same numbers on the same data.  No imports: every layer may read these.
"""

__all__ = [
    "STEADY_WINDOW",
    "OUTLIER_ALPHA",
    "OUTLIER_WINDOW",
    "ELIMINATE",
    "RECONCILIATION_ALPHA",
    "CHECK_STABILITY",
    "MIN_COVERAGE",
    "TREND_ALPHA",
]

#: Length of the steadiest window searched when no window is stated: two hours is a
#: common acceptance-test duration for a steam unit (common practice, no source).
STEADY_WINDOW = "2h"

#: Significance level of the outlier screen: the chance that a clean tag loses any
#: sample in the window (each sample is tested at alpha/n against a running median).
#: 1 % keeps false rejections rare over a plant's 40-odd tags.
OUTLIER_ALPHA = 0.01

#: Samples around each sample whose median it is compared with (odd, at least 5).
OUTLIER_WINDOW = 11

#: Drop suspect instruments one by one while the global test fails (serial elimination).
ELIMINATE = True

#: Significance level of the global and measurement tests of the reconciliation
#: (5 %, the usual level of these tests: common practice, no source).
RECONCILIATION_ALPHA = 0.05

#: Judge the stability of every window of a many-window evaluation.
CHECK_STABILITY = True

#: Smallest share of the expected samples a window (and each tag in it) must hold:
#: valid samples / (window length / sampling interval).  Below it the window is
#: refused.  A fifth missing still leaves a mean that represents the window; a 2 h
#: window holding 10 of its 120 minutes does not (common practice, no source).
MIN_COVERAGE = 0.8

#: Level of the test for a trend inside the window (two-sided), for the window as a
#: whole: each of its m tags is tested at TREND_ALPHA / m (Bonferroni), so a steady
#: window of a 40-tag plant raises a false alarm about once in twenty.
TREND_ALPHA = 0.05
