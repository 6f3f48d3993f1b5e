//! Visibility fit N(θ) = A·(1 + V·cos 2(θ − θ0)).
