"""What the tool works out from a room and a layout: the level at the seat, the placement
search, the left/right explanation, the correction EQ, and measurements against the model.
"""
