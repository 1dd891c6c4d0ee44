"""Profiles: the ASD model and its closed forms (:mod:`.asd`), its units (:mod:`.units`), and the
TOML / CSV / preset files it is read from and written to (:mod:`.files`)."""
