"""verify"""
