"""layer"""
