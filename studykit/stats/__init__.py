"""Pure numerical core: numpy arrays in, frozen results out.

Nothing in here imports pandas, widgets or plotting libraries.
"""
