"""production"""
