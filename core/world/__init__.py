"""World layer: the ``Simulation`` facade, the ordered stages of a step, scene queries.

The only layer that knows all the others; nothing below it imports it at run time.
"""
