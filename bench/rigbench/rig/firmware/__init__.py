"""rig.firmware"""
