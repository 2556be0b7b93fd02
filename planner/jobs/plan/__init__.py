"""planner.jobs.plan"""
