"""The engine: everything that turns a latent process, an observation density and parameters
into a likelihood (the latent state, Gaussian kernel algebra, quadrature, EIS, control variates).
It knows no particular model.
"""
