"""Files and pictures: the output writers (atomic folder), level diagrams and renders, the HTML report.
"""
