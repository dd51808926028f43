"""runner/present"""
