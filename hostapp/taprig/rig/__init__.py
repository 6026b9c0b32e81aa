"""taprig.rig"""
