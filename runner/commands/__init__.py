"""runner/commands"""
