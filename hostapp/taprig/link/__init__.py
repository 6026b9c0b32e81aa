"""taprig.link"""
