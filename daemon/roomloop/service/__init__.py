"""roomloop.service"""
