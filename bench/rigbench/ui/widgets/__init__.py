"""ui.widgets"""
