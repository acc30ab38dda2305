//! 4× quadrature decoding (stub).
