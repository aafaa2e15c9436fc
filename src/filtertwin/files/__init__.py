"""Inputs and outputs: recordings and sensor tables in, time stamps, demo
recordings, safe writing out.
"""
