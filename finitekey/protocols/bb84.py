"""BB84 finite-key analysis (work in progress: the protocol object lands in the next commit)."""
