"""planner.jobs.titration"""
