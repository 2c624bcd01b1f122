"""roomloop.demo"""
