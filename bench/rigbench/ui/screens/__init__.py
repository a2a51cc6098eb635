"""ui.screens"""
