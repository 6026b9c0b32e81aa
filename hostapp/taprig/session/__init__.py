"""taprig.session"""
