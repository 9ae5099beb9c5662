//! RMS delay spread from the estimated channel's power delay profile (in progress).
