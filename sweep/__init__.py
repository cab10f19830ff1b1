"""volsweep: sweep small neural networks for volatility forecasting, record every trial, reopen studies.

Packages by concern (each lists its public names): `study`, `record`, `search`, `review`, `board`,
`cli`; `errors` holds every named error. DEVELOPERS.md gives the import rules.
"""

__all__: list[str] = []
