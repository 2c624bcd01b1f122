"""roomloop.io"""
