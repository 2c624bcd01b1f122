"""roomloop.config"""
