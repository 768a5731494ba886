//! Spectral renderer (helper builds this).
