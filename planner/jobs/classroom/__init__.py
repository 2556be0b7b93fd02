"""planner.jobs.classroom"""
