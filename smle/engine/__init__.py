"""The engine: everything that turns a latent process, an observation density and parameters
into a likelihood (the latent state, Gaussian kernel algebra, quadrature, EIS, control variates).
It takes a model instance but knows no particular model, and never imports :mod:`smle.models`.
The compiled kernels, one per likelihood method, are dispatched from :mod:`smle.engine.methods`.
"""
