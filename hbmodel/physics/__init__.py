"""Layer 1 -- stellar physics, one stage per module, data flowing one way: composition -> giant branch
(RGB locus, core growth, bump, tip) -> mass-loss laws -> helium ignition -> ZAHB -> HB evolution ->
pulsation; and the IMF."""
