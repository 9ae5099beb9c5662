//! CRC-16 and CRC-32 frame checks. (Being written.)
