"""State layer: the struct-of-arrays body table (``Bodies``, ``BodyInfo``) and the contact set.

The tables every stage reads and writes. Depends on the algebra and the geometry layer.
"""
