"""Design records: HTML and Markdown (``record``) with static matplotlib figures (``figures``).

matplotlib is imported here only, and only when a record is made.
"""
