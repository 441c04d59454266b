"""The served dashboard and the command line of gridscore.

``app`` draws what :mod:`evaluation` computes; it never computes a metric itself.
"""
