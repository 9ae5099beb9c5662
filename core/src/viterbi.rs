//! Soft-decision Viterbi decoder of [`crate::conv_code`] on i8 LLRs, with a sliding-window
//! traceback of fixed depth. (Being written.)
