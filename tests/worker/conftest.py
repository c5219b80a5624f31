from tests.pipeline import make_pipeline, pipeline, receiver, warm_engines

__all__ = ["make_pipeline", "pipeline", "receiver", "warm_engines"]
