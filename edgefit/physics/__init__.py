"""edgefit.physics"""
