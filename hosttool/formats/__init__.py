"""The files we read and write, byte for byte: readings CSV, CAL.json, the calibration block,
Intel HEX images.
"""
