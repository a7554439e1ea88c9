"""codegen"""
