"""The C reference firmware built and run: host and Cortex-M builds, QEMU runs, the compiled
firmware as a verify engine.
"""
