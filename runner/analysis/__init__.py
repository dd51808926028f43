"""runner/analysis"""
