//! Signed reviews: a reviewer's claim about one results folder (who, in which role, which
//! decision on which card), signed with an SSH key in the format `ssh-keygen -Y sign` writes,
//! kept as an attached record under `reviews/` so it never touches the evidence; and the checks
//! that judge each recorded review against an allowed-signers file, today's date and the folder.

pub mod allowed_signers;
pub mod judge;
pub mod record;
pub mod signature;
pub mod statement;
