"""rig.plants"""
