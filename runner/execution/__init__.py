"""runner/execution"""
