//! Synthetic dendritic micrographs with known truth (test oracle and demo data).
