"""The live window: the preview loop, its keys and sliders, and the monitor overlay."""
