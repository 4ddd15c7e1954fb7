"""Pure numerical code of lcstore: numpy/astropy/scipy only, never Django.

Every function takes and returns arrays, Quantities or Tables, so the
science can be imported and tested without a configured Django project.
"""
