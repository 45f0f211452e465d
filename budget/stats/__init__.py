"""Statistics shared by the input modules: least-squares regression (JCGM 100 Annex H.3) and
frequency-stability statistics."""
