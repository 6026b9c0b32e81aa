"""taprig.physics"""
