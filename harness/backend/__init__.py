"""backend"""
