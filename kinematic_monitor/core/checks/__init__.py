"""core/checks"""
