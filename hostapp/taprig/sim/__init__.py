"""taprig.sim"""
