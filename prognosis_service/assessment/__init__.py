"""Assessment: the store-backed wiring of health, diagnosis and prognosis for each asset.

``models`` holds the tables (maintenance events, per-asset assessment state, per-window health
points); ``assessor`` turns stored indicator messages into health points, a fitted degradation
model and a diagnosis; ``worker`` runs the assessor in the background; ``views`` builds what the
API returns from what is stored. Every result is advisory: forecasts and diagnoses do not replace
protective trips, and local codes and qualified personnel decide what is done on the machine.
"""
