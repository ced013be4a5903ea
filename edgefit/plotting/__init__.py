"""edgefit.plotting"""
