//! Doppler estimate from the time correlation of pilot channel estimates (in progress).
