"""firmware"""
