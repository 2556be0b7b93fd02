"""planner.jobs.stocks"""
