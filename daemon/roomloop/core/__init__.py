"""roomloop.core"""
