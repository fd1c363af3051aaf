"""Render room: figures, HTML, files, and the one way numbers are written for people."""
