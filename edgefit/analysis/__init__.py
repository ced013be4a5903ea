"""edgefit.analysis"""
