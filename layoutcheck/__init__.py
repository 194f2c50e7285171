"""layoutcheck: verify the layout of scanned and born-digital forms before OCR.

All geometry is in PDF points (1/72 in) with a top-left origin and y down; see
:mod:`layoutcheck.elements`.
"""

__version__ = "0.1.0"
