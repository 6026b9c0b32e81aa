"""taprig.protocol"""
