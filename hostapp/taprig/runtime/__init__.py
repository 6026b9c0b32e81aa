"""taprig.runtime"""
