"""The oversampling factors a twin may run at.

A module of its own, free of heavy imports, so that the command line can name them in its
options without loading the twin (numpy, scipy) to print a help text.
"""

OVERSAMPLING_FACTORS = (1, 2, 4, 8, 16)
"""What ``--oversample auto`` tries, smallest first. The bilinear transform shifts a
section's skirt in frequency by about (pi^2 / 3) (f^2 - f0^2) / fs^2 (from tan(pi f / fs)),
so each doubling of the rate cuts the error four times: a 24 dB/octave skirt is 0.12 dB off
at its -60 dB point at 8x from 48 kHz (bookshelf-2way's woofer, 12.4 kHz) and 0.03 dB at
16x."""

FACTOR_WORDS = ", ".join(str(f) for f in OVERSAMPLING_FACTORS)
"""The factors as the command line lists them: "1, 2, 4, 8, 16"."""
