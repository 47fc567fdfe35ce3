"""The portfolio language's grammar (portfolio.lark), installed as ``portfolio.grammar``."""
