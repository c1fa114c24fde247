"""Pure computation on Arrow/pandas data: reading, inference, profiles, checks, drift.

Knows the dictionary only as the plain objects of ``studylog.data.spec``; never touches the store.
"""
