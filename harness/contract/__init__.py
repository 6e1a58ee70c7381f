"""contract"""
