"""feltlab: measured collision physics from overhead cue-sport video.

Stages (each a pure function of the previous stage's data plus settings):
video -> calibration -> detections -> tracks -> events/segments -> contacts -> outputs.
"""
__version__ = "0.1.0"
