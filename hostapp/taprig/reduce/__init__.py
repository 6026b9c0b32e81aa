"""taprig.reduce"""
