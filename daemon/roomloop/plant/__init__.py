"""roomloop.plant"""
