"""taprig.web — the live dashboard: Flask over the runtime's stations and replays, pushed with Server-Sent Events."""
