"""sequences"""
