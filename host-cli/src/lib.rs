//! Library half of the `hone` workstation tool. The binary stays thin; everything a test may
//! want to call without spawning a process lives here.
