"""seedsweep configs: the shipped YAML files (package data)."""
