"""How results are shown: HTML cells and notebook views (:mod:`.html`)."""
