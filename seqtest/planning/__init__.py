"""Plans: group-sequential designs, sizing, mixture plans, plan documents."""
