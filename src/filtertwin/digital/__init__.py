"""The digital twin and its runner: bilinear sections, the compiled engine,
resampling and offline rendering.
"""
