"""runner/agent_check"""
