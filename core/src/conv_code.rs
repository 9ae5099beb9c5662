//! The rate-1/2, constraint-length-7 convolutional code (generators 133 and 171 octal), its
//! punctured rates 2/3 and 3/4, and the encoder for terminated frames. (Being written.)
