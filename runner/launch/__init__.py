"""runner/launch"""
