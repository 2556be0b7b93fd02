"""planner.jobs.measure"""
