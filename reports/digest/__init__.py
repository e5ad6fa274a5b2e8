"""The weekly digest: what it says (content), how it reads (render), and how
it reaches each subscriber exactly once (delivery)."""
