"""The asset register: sites, machines, positions, oils, pumps and where they sit; its forms and how they save."""
