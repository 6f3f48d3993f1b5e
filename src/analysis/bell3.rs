//! Bell's original three-setting form |E(a,b) − E(a,c)| ≤ 1 + E(b,c).
