"""The wire: the record and frame codec (layout from ``schema/``) and the link to a board over any pyserial URL.

Uses only ``errors``; never touches the store, the science or the terminal.
"""
