"""edgefit.inference"""
