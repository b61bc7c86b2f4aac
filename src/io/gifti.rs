//! GIFTI surface and data files ("GIFTI Surface Data Format Version 1.0",
//! NIfTI Data Format Working Group, 2011). Being written; see issue 2.
