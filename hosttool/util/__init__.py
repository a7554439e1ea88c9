"""util"""
